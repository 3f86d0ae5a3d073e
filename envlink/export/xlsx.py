"""The Excel writer: typed cells, a sheet of column units and descriptions, a provenance sheet.

``NAME.xlsx`` (Office Open XML, written with openpyxl) has three sheets:

- ``NAME`` (cut to Excel's 31 characters): the table, header first and frozen, its
  cells written by :func:`envlink.tables.xlsx.append_table`, the one Excel writer of
  envlink: numbers are number cells, booleans true/false cells, dates date cells
  shown ``yyyy-mm-dd``, text text cells (a cell starting with ``=`` stays text, never
  a formula); missing values are empty cells;
- ``columns``: each column's name, type, unit and description;
- ``provenance``: the ``envlink`` section of the Data Package descriptor, one
  ``key.path`` and value per row.

A table longer than a worksheet (1,048,575 rows under the header), a cell longer than
Excel's 32,767 characters, or a control character Excel cannot store is an
:class:`~envlink.errors.InputError` naming the row and column.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from envlink.errors import InputError
from envlink.export.files import typed_columns
from envlink.tables.write import EXCEL_CELL_LIMIT
from envlink.tables.xlsx import EXCEL_MAX_ROWS, append_table, text_row

__all__ = ["write_xlsx", "EXCEL_MAX_ROWS", "EXCEL_MAX_CELL"]

EXCEL_MAX_CELL = EXCEL_CELL_LIMIT
_SHEET_BAD = re.compile(r"[\[\]:*?/\\]")


def _flatten(obj: Any, prefix: str = "") -> Iterator[tuple[str, str]]:
    """``(key.path, value)`` pairs of a JSON-like mapping, values as text."""
    if isinstance(obj, Mapping):
        for k, v in obj.items():
            yield from _flatten(v, f"{prefix}.{k}" if prefix else str(k))
    elif isinstance(obj, list) and any(isinstance(v, Mapping | list) for v in obj):
        for i, v in enumerate(obj):
            yield from _flatten(v, f"{prefix}[{i}]")
    else:
        yield prefix, obj if isinstance(obj, str) else json.dumps(obj, ensure_ascii=False)


def _check_text(columns: list[tuple[dict[str, Any], pd.Series]]) -> None:
    """Refuse text Excel cannot hold (before anything is written), naming the row and column."""
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    for field, s in columns:
        if field["type"] != "string":
            continue
        for i, value in enumerate(s.tolist(), start=1):
            if value is None:
                continue
            if m := ILLEGAL_CHARACTERS_RE.search(value):
                raise InputError(
                    f"Cannot write the Excel file: row {i}, column {field['name']!r} holds the control "
                    f"character U+{ord(m.group()):04X}, which Excel files cannot store; remove it from the "
                    "input, or leave 'xlsx' out of the formats."
                )
            if len(value) > EXCEL_MAX_CELL:
                raise InputError(
                    f"Cannot write the Excel file: row {i}, column {field['name']!r} holds "
                    f"{len(value):,} characters; an Excel cell holds at most {EXCEL_MAX_CELL:,}."
                )


def _sheet_name(name: str) -> str:
    title = _SHEET_BAD.sub("_", name)[:31].strip("'") or "table"
    return "table" if title.lower() in ("columns", "provenance", "history") else title


def write_xlsx(df: pd.DataFrame, files: Mapping[str, Path], descriptor: Mapping[str, Any], name: str) -> None:
    """``files["xlsx"]``: the table with typed cells, its ``columns`` and ``provenance`` sheets."""
    from openpyxl import Workbook
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    if len(df) >= EXCEL_MAX_ROWS:
        raise InputError(
            f"Cannot write the Excel file: the table has {len(df):,} rows and a worksheet holds "
            f"{EXCEL_MAX_ROWS - 1:,} under its header; write 'csv' or 'parquet' instead."
        )
    columns = typed_columns(df, descriptor)
    _check_text(columns)
    wb = Workbook(write_only=True)
    ws = wb.create_sheet(_sheet_name(name))
    append_table(ws, [(str(f["name"]), f["type"], s) for f, s in columns])  # text never a formula
    about = wb.create_sheet("columns")
    about.append(text_row(about, ["column", "type", "unit", "description"], bold=True))
    for f, _ in columns:
        about.append(text_row(about, [f["name"], f["type"], f.get("unit"), f.get("description")]))
    prov = wb.create_sheet("provenance")
    prov.append(text_row(prov, ["key", "value"], bold=True))
    for key, value in _flatten(descriptor.get("envlink", {})):
        clean = None if value is None else ILLEGAL_CHARACTERS_RE.sub("", value)[:EXCEL_MAX_CELL]
        prov.append(text_row(prov, [key, clean]))
    wb.save(files["xlsx"])
