"""Export the enriched table with its schema and provenance: CSV + Data Package, Parquet, GeoPackage.

One call writes a set of files into one folder:

- ``NAME.csv`` with a Frictionless Data Package descriptor ``datapackage.json`` beside
  it (field types, units, descriptions, the missing-value marker ``""`` and an
  ``envlink`` provenance section);
- ``NAME.parquet`` carrying the same descriptor in its schema metadata (key
  ``envlink``) and each field's description and unit in the field metadata;
- ``NAME.gpkg``: one layer ``NAME``, one feature per row, a point at
  ``site_lat`` / ``site_lon`` or the region polygon from ``site_wkt`` (EPSG:4326);
  rows without a location have an empty geometry (the geometry column is named
  ``geom`` and the feature id ``gpkg_fid`` where the table has a ``geometry`` /
  ``fid`` column of its own, so those keep their values);
- ``fit.json`` (the meta-regression JSON contract) and ``fit.txt`` (its summary),
  when a fit is given.

Every input row and column is kept, in order, followed by the added columns. Empty
text cells are written as missing values in every format. Each file is written to a
temporary file beside its target and all of them are renamed into place only after
every one has been written, so an interrupted export leaves any previous output as
it was.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from envlink._exportschema import file_sha256, jsonable, software_versions, table_schema
from envlink._util import atomic_path, did_you_mean
from envlink.errors import InputError

__all__ = ["export_table", "check_columns_exportable", "table_schema", "software_versions", "file_sha256", "FORMATS"]

#: Table formats :func:`export_table` writes.
FORMATS = ("csv", "parquet", "gpkg")

def _missing(v: Any) -> bool:
    if v is None or v is pd.NA or v is pd.NaT:
        return True
    return isinstance(v, float) and math.isnan(v)


def _normalised(table: pd.DataFrame, schema: Mapping[str, Any]) -> pd.DataFrame:
    """Copy with plain columns: text ("" -> None), ISO dates as text, numbers as float64."""
    out: dict[str, pd.Series] = {}
    for field, col in zip(schema["fields"], table.columns, strict=True):
        s = table[col].reset_index(drop=True)
        kind = field["type"]
        if kind == "number":
            out[str(col)] = s.astype(np.float64)
            continue
        if kind == "integer" and not s.isna().any():
            out[str(col)] = s.astype(np.int64)
            continue
        if kind == "date" and pd.api.types.is_datetime64_any_dtype(s.dtype):
            s = s.dt.strftime("%Y-%m-%d")
        values: list[Any] = []
        for v in s.tolist():
            if _missing(v) or v == "":
                values.append(None)
            elif kind == "boolean":
                values.append(bool(v))
            elif kind == "integer":
                values.append(int(v))
            else:
                values.append(str(v))
        if kind == "boolean":
            has_na = any(v is None for v in values)
            out[str(col)] = pd.Series(values, dtype="boolean" if has_na else bool)
        else:
            out[str(col)] = pd.Series(values, dtype=object)
    return pd.DataFrame(out, index=range(len(table)))


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    df.to_csv(path, index=False, encoding="utf-8", na_rep="", lineterminator="\n")


def _write_parquet(df: pd.DataFrame, path: Path, descriptor: Mapping[str, Any], schema) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrays, fields = [], []
    for field in schema["fields"]:
        s = df[field["name"]]
        if field["type"] == "date":
            values = [None if v is None else _dt.date.fromisoformat(v) for v in s]
            arr = pa.array(values, type=pa.date32())
        elif field["type"] == "string":
            arr = pa.array(list(s), type=pa.string())
        elif field["type"] == "boolean":
            arr = pa.array([None if _missing(v) else bool(v) for v in s], type=pa.bool_())
        elif field["type"] == "integer":
            arr = pa.array([None if _missing(v) else int(v) for v in s], type=pa.int64())
        else:
            arr = pa.array(s.to_numpy(dtype=np.float64), type=pa.float64(), from_pandas=True)
        meta = {k: str(field[k]) for k in ("description", "unit") if k in field}
        fields.append(pa.field(field["name"], arr.type, metadata=meta or None))
        arrays.append(arr)
    meta = {"envlink": json.dumps(descriptor, ensure_ascii=False)}
    table = pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=meta))
    pq.write_table(table, path)


def _geometries(df: pd.DataFrame) -> list[Any]:
    import shapely

    lat = pd.to_numeric(df.get("site_lat"), errors="coerce") if "site_lat" in df else None
    lon = pd.to_numeric(df.get("site_lon"), errors="coerce") if "site_lon" in df else None
    wkt = df["site_wkt"] if "site_wkt" in df else None
    geoms: list[Any] = []
    for i in range(len(df)):
        g = None
        if wkt is not None and isinstance(wkt.iloc[i], str) and wkt.iloc[i].strip():
            try:
                g = shapely.from_wkt(wkt.iloc[i])
            except shapely.errors.GEOSException as exc:
                raise InputError(
                    f"Row {i + 1}: column 'site_wkt' holds text that is not WKT ({exc}); "
                    "expected e.g. 'POLYGON ((lon lat, ...))'."
                ) from exc
        elif lat is not None and lon is not None and np.isfinite(lat.iloc[i]) and np.isfinite(lon.iloc[i]):
            g = shapely.Point(float(lon.iloc[i]), float(lat.iloc[i]))
        geoms.append(g)
    return geoms


def _unused(names: Sequence[str], taken: set[str]) -> str:
    name = next((n for n in names if n not in taken), None)
    if name is None:
        name = next(f"{names[-1]}_{i}" for i in range(1, len(taken) + 2) if f"{names[-1]}_{i}" not in taken)
    return name


def _write_gpkg(df: pd.DataFrame, path: Path, layer: str) -> None:
    import geopandas as gpd

    # A user column named 'geometry' or 'fid' keeps its values: the geometry and the
    # GeoPackage feature id then take names no column has.
    taken = {str(c).lower() for c in df.columns}
    geom_name = _unused(("geometry", "geom", "site_geometry"), taken)
    fid_name = _unused(("fid", "gpkg_fid", "envlink_fid"), taken)
    geoms = gpd.GeoSeries(_geometries(df), index=df.index, crs="EPSG:4326", name=geom_name)
    gdf = gpd.GeoDataFrame(pd.concat([df, geoms], axis=1), geometry=geom_name, crs="EPSG:4326")
    # GDAL wants the .gpkg extension: write beside the temporary file, then move onto it.
    staged = path.with_name(path.name + ".gpkg")
    try:
        try:
            gdf.to_file(staged, driver="GPKG", layer=layer, engine="pyogrio",
                        layer_options={"FID": fid_name, "GEOMETRY_NAME": geom_name})
        except OSError:
            raise
        except Exception as exc:  # noqa: BLE001 - GDAL's field/layer errors are about the table
            raise InputError(f"Cannot write the GeoPackage layer {layer!r}: {exc}.") from exc
        os.replace(staged, path)
    finally:
        if staged.exists():
            staged.unlink()


def _fit_json(fit: Any) -> str:
    return json.dumps(jsonable(fit.to_dict()), indent=2, ensure_ascii=False) + "\n"


def _fit_text(fit: Any) -> str:
    summary = fit.summary() if hasattr(fit, "summary") else fit
    return str(summary).rstrip("\n") + "\n"


def _check_formats(formats: Sequence[str]) -> tuple[str, ...]:
    if isinstance(formats, str):
        formats = (formats,)
    for f in formats:
        if f not in FORMATS:
            raise InputError(
                f"The 'formats' parameter of export_table must be a list of {', '.join(FORMATS)}; "
                f"got {f!r}.{did_you_mean(f, FORMATS)}"
            )
    return tuple(dict.fromkeys(formats))


def check_columns_exportable(columns: Sequence[object], formats: Sequence[str]) -> None:
    """Raise :class:`InputError` when the columns cannot all be written in ``formats``.

    GeoPackage (SQLite) column names are case-insensitive, so two columns that differ
    only in case (``fid`` / ``FID``) cannot both be kept there. Run it before a long
    pipeline so the problem shows at the start, not after the work.

    Examples
    --------
    >>> check_columns_exportable(["reef", "Reef"], ["csv"])
    >>> check_columns_exportable(["reef", "Reef"], ["csv", "gpkg"])
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The columns 'reef' and 'Reef' differ only in case, which a GeoPackage cannot hold...
    """
    if "gpkg" not in formats:
        return
    seen: dict[str, str] = {}
    for col in map(str, columns):
        key = col.lower()
        if key in seen:
            raise InputError(
                f"The columns {seen[key]!r} and {col!r} differ only in case, which a GeoPackage "
                "cannot hold (its column names ignore case); rename one, or leave 'gpkg' out of "
                "the export formats."
            )
        seen[key] = col


def export_table(
    table: pd.DataFrame,
    out: str | os.PathLike[str],
    *,
    formats: Sequence[str] = FORMATS,
    name: str | None = None,
    fit: Any | None = None,
    provenance: Mapping[str, Any] | None = None,
    input_columns: Sequence[str] | None = None,
    descriptions: Mapping[str, str] | None = None,
    units: Mapping[str, str] | None = None,
    project_sha256: str | None = None,
    title: str | None = None,
    force: bool = False,
) -> dict[str, Path]:
    """Write the enriched table (and the fit) with schema and provenance.

    Parameters
    ----------
    table : pandas.DataFrame
        The enriched table: every input row and column, then the added columns.
    out : path-like
        Output folder; or a file path ending in ``.csv``, ``.parquet`` or ``.gpkg``,
        whose folder and stem are then used.
    formats : sequence of {"csv", "parquet", "gpkg"}
        Table formats to write. ``csv`` always comes with ``datapackage.json``.
    name : str, optional
        File stem (default ``"enriched"``, or the stem of ``out``).
    fit : fitted meta-regression, optional
        Anything with ``to_dict()`` and ``summary()``; written as ``fit.json`` and ``fit.txt``.
    provenance : mapping, optional
        Recorded under ``envlink`` in the descriptor. Default ``table.attrs["envlink"]``
        (where :func:`envlink.attach` keeps each covariate's provenance under its name).
        Its ``covariates`` entry (name -> provenance with ``units``, ``stat``,
        ``window``, ``spatial``, ``grid``) describes the covariate columns; without one,
        entries named after a covariate column are taken as its provenance.
    input_columns : sequence of str, optional
        The user's own columns, described as such in the schema.
    descriptions, units : mapping, optional
        Per-column description and unit overrides.
    project_sha256 : str, optional
        SHA-256 of the project file, recorded in the provenance.
    title : str, optional
        Title of the data package.
    force : bool, default False
        Overwrite existing outputs. Without it an existing output is an :class:`InputError`.

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``csv``, ``datapackage``, ``parquet``, ``gpkg``, ``fit_json``, ``fit_text``
        for the files written.

    Raises
    ------
    InputError
        A bad format name, an existing output without ``force``, or a table that
        cannot be written (the message says which file and why).

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> t = pd.DataFrame({"reef": ["Pell Bommie"], "site_lat": [-9.1], "site_lon": [-117.2]})
    >>> paths = export_table(t, tempfile.mkdtemp(), formats=["csv"])
    >>> sorted(paths)
    ['csv', 'datapackage']
    """
    formats = _check_formats(formats)
    check_columns_exportable(list(table.columns), formats)
    target = Path(out)
    if target.suffix.lower() in (".csv", ".parquet", ".gpkg"):
        name = name or target.stem
        target = target.parent
    name = name or "enriched"
    if not re.fullmatch(r"[A-Za-z0-9._-]+", name):
        raise InputError(
            f"The 'name' parameter of export_table must be letters, digits, '.', '_' or '-'; "
            f"got {name!r}."
        )
    paths: dict[str, Path] = {}
    if "csv" in formats:
        paths["csv"] = target / f"{name}.csv"
        paths["datapackage"] = target / "datapackage.json"
    if "parquet" in formats:
        paths["parquet"] = target / f"{name}.parquet"
    if "gpkg" in formats:
        paths["gpkg"] = target / f"{name}.gpkg"
    if fit is not None:
        paths["fit_json"] = target / "fit.json"
        paths["fit_text"] = target / "fit.txt"
    existing = [str(p) for p in paths.values() if p.exists()]
    if existing and not force:
        raise InputError(
            f"Output exists and would be overwritten: {', '.join(repr(p) for p in existing)}; "
            "pass force=True (--force on the command line) to replace it."
        )
    if target.exists() and not target.is_dir():
        raise InputError(f"Cannot export into {str(target)!r}: it is a file, not a folder.")

    prov = dict(provenance if provenance is not None else table.attrs.get("envlink", {}) or {})
    covariates = prov.get("covariates")
    if covariates is None:  # attach's own record: table.attrs["envlink"][name] per covariate
        covariates = {k: v for k, v in prov.items() if isinstance(v, Mapping)
                      and k in table.columns and f"{k}_flags" in table.columns}  # fmt: skip
        prov = {k: v for k, v in prov.items() if k not in covariates}
        prov["covariates"] = covariates
    schema = table_schema(table, input_columns=input_columns, covariates=covariates,
                          descriptions=descriptions, units=units)  # fmt: skip
    df = _normalised(table, schema)
    package_name = re.sub(r"[^a-z0-9._-]+", "-", name.lower()).strip("-") or "enriched"
    envlink_section = {
        **jsonable(prov),
        "software": software_versions(),
        "project_sha256": project_sha256,
        "created": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "rows": len(df),
    }
    descriptor: dict[str, Any] = {
        "profile": "tabular-data-package",
        "name": package_name,
        "title": title or f"{name}: enriched table written by envlink",
        "resources": [{
            "name": package_name, "path": f"{name}.csv", "profile": "tabular-data-resource",
            "format": "csv", "mediatype": "text/csv", "encoding": "utf-8",
            "dialect": {"delimiter": ",", "doubleQuote": True, "header": True},
            "schema": schema,
        }],  # fmt: skip
        "envlink": envlink_section,
    }
    try:
        with contextlib.ExitStack() as stack:  # every file renamed into place only at the end
            tmp = {key: stack.enter_context(atomic_path(p)) for key, p in paths.items()}
            if "csv" in tmp:
                _write_csv(df, tmp["csv"])
                tmp["datapackage"].write_text(
                    json.dumps(descriptor, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
                )
            if "parquet" in tmp:
                _write_parquet(df, tmp["parquet"], descriptor, schema)
            if "gpkg" in tmp:
                _write_gpkg(df, tmp["gpkg"], layer=name)
            if fit is not None:
                tmp["fit_json"].write_text(_fit_json(fit), encoding="utf-8")
                tmp["fit_text"].write_text(_fit_text(fit), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"Cannot export into {str(target)!r}: {exc.strerror or exc}.") from exc
    except ImportError as exc:
        raise InputError(f"Cannot export into {str(target)!r}: {exc}") from exc
    return paths
