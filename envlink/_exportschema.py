"""The Table Schema of an enriched table: field types, units, descriptions; provenance helpers.

Used by :mod:`envlink.export`. Types follow the Frictionless Table Schema
(``string``, ``number``, ``integer``, ``boolean``, ``date``); units and descriptions
of the columns the stages add are known here, those of covariates come from their
provenance.
"""

from __future__ import annotations

import contextlib
import hashlib
import math
import os
import platform
import re
from collections.abc import Mapping, Sequence
from importlib import metadata
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["table_schema", "software_versions", "file_sha256", "jsonable"]

_DATE_RE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_DATE_COLUMNS = ("period_start", "period_end")

#: Description and unit of the columns the stages add (covariate columns are matched
#: by suffix; their units come from provenance).
_KNOWN: dict[str, tuple[str, str | None]] = {
    "site_lat": ("Site latitude, WGS84 decimal degrees.", "degrees_north"),
    "site_lon": ("Site longitude, WGS84 decimal degrees in [-180, 180).", "degrees_east"),
    "site_precision_km": ("Precision of the reported site position.", "km"),
    "period_start": ("First day of the sampling period (ISO 8601, inclusive).", None),
    "period_end": ("Last day of the sampling period (ISO 8601, inclusive).", None),
    "period_precision": ("Precision of the reported period: day, month, season, year, years.", None),
    "locate_status": ("Result of locating the row: ok, flagged or rejected.", None),
    "locate_flags": ("QA codes of the locate stage, separated by ';'.", None),
    "locate_notes": ("Plain-words notes of the locate stage.", None),
    "site_wkt": ("Region polygon of the site as WKT (WGS84), for region sites.", None),
    "effect": ("Effect size.", None),
    "variance": ("Sampling variance of the effect size.", None),
    "effect_flags": ("QA codes of the effect-size computation, separated by ';'.", None),
    "fit_included": ("True when the row entered the meta-regression.", None),
}
_COVARIATE_SUFFIXES: dict[str, tuple[str, str | None]] = {
    "_flags": ("QA codes of covariate {c}, separated by ';'.", None),
    "_cell_lat": ("Latitude of the grid cell that gave covariate {c}.", "degrees_north"),
    "_cell_lon": ("Longitude of the grid cell that gave covariate {c}.", "degrees_east"),
    "_distance_km": ("Great-circle distance from the site to that cell.", "km"),
    "_coverage": ("Fraction of the window's time steps with data, for {c}.", "1"),
}


def software_versions() -> dict[str, str]:
    """Versions of Python and of the libraries that shape the results.

    Examples
    --------
    >>> "python" in software_versions()
    True
    """
    out = {"python": platform.python_version()}
    for dist in ("envlink", "numpy", "pandas", "scipy", "xarray", "netCDF4", "cftime",
                 "pyproj", "shapely", "geopandas", "pyarrow"):  # fmt: skip
        with contextlib.suppress(metadata.PackageNotFoundError):
            out[dist] = metadata.version(dist)
    return out


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


def _is_text(s: pd.Series) -> bool:
    return bool(pd.api.types.is_string_dtype(s.dtype) or s.dtype == object)


def _field_type(name: str, s: pd.Series) -> str:
    if pd.api.types.is_bool_dtype(s.dtype):
        return "boolean"
    if pd.api.types.is_integer_dtype(s.dtype):
        return "integer"
    if pd.api.types.is_float_dtype(s.dtype):
        return "number"
    if pd.api.types.is_datetime64_any_dtype(s.dtype):
        return "date"
    if name in _DATE_COLUMNS:
        values = s.dropna().astype(str)
        values = values[values != ""]
        if values.map(lambda v: bool(_DATE_RE.match(v))).all():
            return "date"
    if _is_text(s):
        non_missing = s.dropna()
        kinds = {type(v) for v in non_missing}
        if kinds and kinds <= {bool, np.bool_}:
            return "boolean"
    return "string"


def _describe(name: str, columns: Sequence[str], covariates: Mapping[str, Any]):
    """(description, unit) of one column."""
    if name in covariates:
        prov = covariates[name] if isinstance(covariates[name], Mapping) else {}
        bits = [f"{k}={prov[k]}" for k in ("stat", "window", "spatial", "baseline") if k in prov]
        text = f"Covariate {name} attached from a grid" + (f" ({', '.join(bits)})." if bits else ".")
        return text, prov.get("units")
    for suffix, (text, unit) in _COVARIATE_SUFFIXES.items():
        base = name[: -len(suffix)]
        if name.endswith(suffix) and base in covariates:
            return text.format(c=base), unit
    if name in _KNOWN:
        return _KNOWN[name]
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
