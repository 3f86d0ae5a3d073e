"""The writer of each export format: one function per entry of :data:`~envlink.export.formats.EXPORT_FORMATS`.

Every writer takes the normalised table (the input's text as written, float64,
ISO dates as text; see :func:`envlink.export.writers.export_table`), the temporary
files to write keyed as :func:`~envlink.export.formats.output_paths` keys them, the
Data Package descriptor and the file stem. The typed writers (Parquet here,
:mod:`envlink.export.gpkg`, :mod:`envlink.export.xlsx`) type each column as the
descriptor's schema says. Optional libraries are imported by the writer that needs them.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from envlink.tables.kinds import typed_column
from envlink.tables.write import csv_line_end

__all__ = ["write_csv", "write_csv_bom", "write_parquet", "typed_columns", "is_missing"]


def is_missing(v: Any) -> bool:
    """Whether a cell is missing: None, ``pd.NA``, ``pd.NaT`` or a float NaN."""
    if v is None or v is pd.NA or v is pd.NaT:
        return True
    return isinstance(v, float) and math.isnan(v)


def write_csv(df: pd.DataFrame, files: Mapping[str, Path], descriptor: Mapping[str, Any], name: str,
              *, encoding: str = "utf-8") -> None:
    """``files["csv"]``: the table as UTF-8 CSV; ``files["datapackage"]``: the descriptor as JSON.

    Text columns are written as they are in the table (the input's text as written);
    the descriptor says how to read each column. The bytes are those of pandas'
    ``to_csv``, built faster (:func:`envlink.tables.csvtext.write_csv`).
    """
    from envlink.tables import write_csv as csv_file

    csv_file(df, files["csv"], lineterminator=csv_line_end(df), encoding=encoding)
    files["datapackage"].write_text(json.dumps(descriptor, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def write_csv_bom(df: pd.DataFrame, files: Mapping[str, Path], descriptor: Mapping[str, Any], name: str) -> None:
    """As :func:`write_csv`, the CSV starting with a UTF-8 byte-order mark (which spreadsheets
    read as "this file is UTF-8"; CSV readers that know UTF-8 skip it)."""
    write_csv(df, files, descriptor, name, encoding="utf-8-sig")


def typed_columns(df: pd.DataFrame, descriptor: Mapping[str, Any]) -> list[tuple[dict[str, Any], pd.Series]]:
    """Each field of the descriptor's schema with its column typed as the field says
    (Int64, float64, boolean, ``datetime.date`` objects or text)."""
    fields = descriptor["resources"][0]["schema"]["fields"]
    return [(f, typed_column(df[f["name"]], f["type"])) for f in fields]


def write_parquet(df: pd.DataFrame, files: Mapping[str, Path], descriptor: Mapping[str, Any], name: str) -> None:
    """``files["parquet"]``: typed columns, the descriptor in the schema metadata (key ``envlink``)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    types = {"integer": pa.int64(), "number": pa.float64(), "boolean": pa.bool_(), "date": pa.date32(),
             "string": pa.string()}  # fmt: skip
    arrays, fields = [], []
    for field, s in typed_columns(df, descriptor):
        arr = pa.array(s, type=types[field["type"]], from_pandas=True)
        meta = {k: str(field[k]) for k in ("description", "unit") if k in field}
        fields.append(pa.field(field["name"], arr.type, metadata=meta or None))
        arrays.append(arr)
    about = {"envlink": json.dumps(descriptor, ensure_ascii=False)}
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=about))
    pq.write_table(table, files["parquet"])
