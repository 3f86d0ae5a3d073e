"""The Table Schema of an enriched table: field types, units, descriptions; provenance helpers.

Used by :mod:`envlink.export`. Types follow the Frictionless Table Schema
(``string``, ``number``, ``integer``, ``boolean``, ``date``): a column's dtype, or for
a text column the kind all its cells parse as (:mod:`envlink.tables.kinds`; the CSV
keeps the text as written, and the schema says how to read it); units and descriptions
of the columns the stages add come from :mod:`envlink.core.columns`, those of
covariates from their provenance. ``software_versions`` is
:func:`envlink.core.versions.software_versions`, re-exported.
"""

from __future__ import annotations

import hashlib
import math
import os
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.columns import KNOWN_COLUMNS, SUFFIX_DESCRIPTIONS
from envlink.core.versions import software_versions
from envlink.tables.kinds import column_kind

__all__ = ["table_schema", "software_versions", "file_sha256", "jsonable"]

def file_sha256(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file's bytes (the project file's identity in provenance).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> _ = p.write_bytes(b"abc")
    >>> file_sha256(p)[:16]
    'ba7816bf8f01cfea'
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def jsonable(obj: Any) -> Any:
    """Make provenance JSON-safe: NaN/inf become null, numpy scalars plain numbers."""
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer, int)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        return None if not math.isfinite(float(obj)) else float(obj)
    if obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, str | bytes):
        return str(obj)
    return str(obj)


def _field_type(name: str, s: pd.Series) -> str:
    """The Table Schema type of a column: its dtype's, or for text the kind every cell parses as
    (:mod:`envlink.tables.kinds`: numbers written as text are numbers)."""
    return column_kind(s)


def _describe(name: str, columns: Sequence[str], covariates: Mapping[str, Any]):
    """(description, unit) of one column."""
    if name in covariates:
        prov = covariates[name] if isinstance(covariates[name], Mapping) else {}
        bits = [f"{k}={prov[k]}" for k in ("stat", "window", "spatial", "baseline") if k in prov]
        text = f"Covariate {name} attached from a grid" + (f" ({', '.join(bits)})." if bits else ".")
        return text, prov.get("units")
    for suffix, (text, unit) in SUFFIX_DESCRIPTIONS.items():
        base = name[: -len(suffix)]
        if name.endswith(suffix) and base in covariates:
            return text.format(c=base), unit
    if name in KNOWN_COLUMNS:
        return KNOWN_COLUMNS[name]
    return None, None


def table_schema(
    table: pd.DataFrame,
    *,
    input_columns: Sequence[str] | None = None,
    covariates: Mapping[str, Any] | None = None,
    descriptions: Mapping[str, str] | None = None,
    units: Mapping[str, str] | None = None,
) -> dict[str, Any]:
    """Build the Frictionless Table Schema of ``table``.

    Parameters
    ----------
    table : pandas.DataFrame
    input_columns : sequence of str, optional
        Columns that came from the user's table (described as such).
    covariates : mapping, optional
        Covariate name -> its provenance (``stat``, ``window``, ``spatial``, ``units``...).
    descriptions, units : mapping, optional
        Override the description or unit of any column.

    Returns
    -------
    dict
        ``{"fields": [...], "missingValues": [""]}``; each field has ``name``,
        ``type`` (``string``, ``number``, ``integer``, ``boolean``, ``date``) and,
        where known, ``description`` and ``unit``.

    Examples
    --------
    >>> import pandas as pd
    >>> s = table_schema(pd.DataFrame({"a": ["x"], "site_lat": [1.5]}), input_columns=["a"])
    >>> [(f["name"], f["type"], f.get("unit")) for f in s["fields"]]
    [('a', 'string', None), ('site_lat', 'number', 'degrees_north')]
    """
    covariates = dict(covariates or {})
    inputs = set(input_columns or ())
    fields = []
    for col in table.columns:
        name = str(col)
        field: dict[str, Any] = {"name": name, "type": _field_type(name, table[col])}
        text, unit = _describe(name, list(table.columns), covariates)
        if name in inputs and text is None:
            text = "Column of the input table, as given."
        if descriptions and name in descriptions:
            text = descriptions[name]
        if units and name in units:
            unit = units[name]
        if text:
            field["description"] = text
        if unit:
            field["unit"] = unit
        fields.append(field)
    return {"fields": fields, "missingValues": [""]}
