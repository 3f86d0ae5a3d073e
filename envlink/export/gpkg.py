"""The GeoPackage writer: one layer per geometry type, typed fields, units and descriptions.

``NAME.gpkg`` (OGC GeoPackage 1.2, EPSG:4326) holds

- layer ``NAME``: every row, in order, as a point at ``site_lat`` / ``site_lon`` (the
  point inside a region for region sites; an empty geometry where a row has no
  location), so the layer has one geometry type, as GIS programs expect;
- layer ``NAME_regions`` (only when some row is a region): those rows again, with
  the region's polygon from ``site_wkt`` (polygons, or multipolygons when any region
  has several parts).

Every column is a typed field: integers, reals, booleans, dates (``DATE``), text, as
the Data Package schema says. Each field's description and unit go into the
GeoPackage schema extension's ``gpkg_data_columns`` table (``name`` the column with
its unit in brackets, ``title`` the unit, ``description`` the text), which GDAL
(and so QGIS) reads as field aliases and comments. Written with pyogrio's plain
writer, so neither geopandas nor pyarrow is needed.
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from envlink.errors import InputError
from envlink.export.files import typed_columns

__all__ = ["write_gpkg", "REGIONS_SUFFIX"]

#: The second layer's name is the table's name + this suffix.
REGIONS_SUFFIX = "_regions"


def _unused(names: Sequence[str], taken: set[str]) -> str:
    name = next((n for n in names if n not in taken), None)
    if name is None:
        name = next(f"{names[-1]}_{i}" for i in range(1, len(taken) + 2) if f"{names[-1]}_{i}" not in taken)
    return name


def _points(df: pd.DataFrame) -> np.ndarray:
    """WKB points at each row's site (None where it has none)."""
    import shapely

    n = len(df)
    lat = pd.to_numeric(df["site_lat"], errors="coerce").to_numpy(np.float64) if "site_lat" in df else np.full(n, np.nan)
    lon = pd.to_numeric(df["site_lon"], errors="coerce").to_numpy(np.float64) if "site_lon" in df else np.full(n, np.nan)
    ok = np.isfinite(lat) & np.isfinite(lon)
    geoms = np.full(n, None, dtype=object)
    geoms[ok] = shapely.points(lon[ok], lat[ok])
    return shapely.to_wkb(geoms)


def _regions(df: pd.DataFrame) -> tuple[np.ndarray, list[Any]]:
    """The rows that are regions and their polygons (from ``site_wkt``)."""
    import shapely

    if "site_wkt" not in df:
        return np.array([], dtype=np.int64), []
    rows, geoms = [], []
    for i, text in enumerate(df["site_wkt"].tolist()):
        if not isinstance(text, str) or not text.strip():
            continue
        try:
            geom = shapely.from_wkt(text)
        except shapely.errors.GEOSException as exc:
            raise InputError(
                f"Row {i + 1}: column 'site_wkt' holds text that is not WKT ({exc}); "
                "expected e.g. 'POLYGON ((lon lat, ...))'."
            ) from exc
        if geom.geom_type not in ("Polygon", "MultiPolygon"):
            raise InputError(f"Row {i + 1}: column 'site_wkt' holds a {geom.geom_type}; a region is a polygon.")
        rows.append(i)
        geoms.append(geom)
    return np.asarray(rows, dtype=np.int64), geoms


def _fields(columns: Sequence[tuple[dict[str, Any], pd.Series]], rows: np.ndarray | None
            ) -> tuple[list[np.ndarray], list[np.ndarray | None]]:
    """pyogrio's field arrays and null masks, typed as the schema says (``rows``: a subset)."""
    data: list[np.ndarray] = []
    masks: list[np.ndarray | None] = []
    for field, s in columns:
        s = s if rows is None else s.iloc[rows]
        kind = field["type"]
        if kind in ("integer", "boolean"):
            na = s.isna().to_numpy(dtype=bool)
            dtype = np.int64 if kind == "integer" else np.bool_
            data.append(s.fillna(0 if kind == "integer" else False).to_numpy(dtype=dtype))
            masks.append(na if na.any() else None)
        elif kind == "number":
            data.append(s.to_numpy(dtype=np.float64))  # NaN is written as null
            masks.append(None)
        elif kind == "date":
            data.append(np.array([np.datetime64("NaT") if v is None else np.datetime64(v, "D") for v in s],
                                 dtype="datetime64[D]"))  # fmt: skip
            masks.append(None)
        else:
            data.append(np.array([None if v is None else str(v) for v in s], dtype=object))
            masks.append(None)
    return data, masks


_DATA_COLUMNS_DDL = """
CREATE TABLE IF NOT EXISTS gpkg_data_columns (
  table_name TEXT NOT NULL, column_name TEXT NOT NULL, name TEXT, title TEXT, description TEXT,
  mime_type TEXT, constraint_name TEXT,
  CONSTRAINT pk_gdc PRIMARY KEY (table_name, column_name),
  CONSTRAINT gdc_tn UNIQUE (table_name, name))
"""


def _describe_columns(path: Path, layers: Sequence[str], fields: Sequence[Mapping[str, Any]]) -> None:
    """Each field's unit and description in ``gpkg_data_columns`` (GeoPackage schema extension)."""
    rows = []
    for layer in layers:
        for f in fields:
            if "description" not in f and "unit" not in f:
                continue
            unit = f.get("unit")
            rows.append((layer, f["name"], f"{f['name']} [{unit}]" if unit else f["name"], unit,
                         f.get("description")))  # fmt: skip
    with sqlite3.connect(path) as con:
        con.execute(_DATA_COLUMNS_DDL)
        con.execute(
            "INSERT OR IGNORE INTO gpkg_extensions (table_name, column_name, extension_name, definition, scope) "
            "VALUES ('gpkg_data_columns', NULL, 'gpkg_schema', "
            "'http://www.geopackage.org/spec121/#extension_schema', 'read-write')"
        )
        con.executemany(
            "INSERT OR REPLACE INTO gpkg_data_columns (table_name, column_name, name, title, description) "
            "VALUES (?, ?, ?, ?, ?)", rows,
        )
    con.close()


def write_gpkg(df: pd.DataFrame, files: Mapping[str, Path], descriptor: Mapping[str, Any], name: str) -> None:
    """``files["gpkg"]``: layer ``name`` (a point per row) and ``name_regions`` (region polygons)."""
    import shapely
    from pyogrio.raw import write

    path = files["gpkg"]
    columns = typed_columns(df, descriptor)
    # A user column named 'geometry' or 'fid' keeps its values: the geometry and the
    # GeoPackage feature id then take names no column has.
    taken = {str(c).lower() for c in df.columns}
    options = {"FID": _unused(("fid", "gpkg_fid", "envlink_fid"), taken),
               "GEOMETRY_NAME": _unused(("geometry", "geom", "site_geometry"), taken)}  # fmt: skip
    names = [f["name"] for f, _ in columns]
    rows, polygons = _regions(df)
    layers = [name] + ([name + REGIONS_SUFFIX] if rows.size else [])
    # GDAL wants the .gpkg extension: write beside the temporary file, then move onto it.
    staged = path.with_name(path.name + ".gpkg")
    try:
        try:
            data, masks = _fields(columns, None)
            write(staged, _points(df), data, names, field_mask=masks, layer=name, driver="GPKG",
                  geometry_type="Point", crs="EPSG:4326", layer_options={
                      **options, "DESCRIPTION": f"{name}: every row of the table, a point at its site"})  # fmt: skip
            if rows.size:
                multi = any(g.geom_type == "MultiPolygon" for g in polygons)
                geoms = [shapely.MultiPolygon([g]) if multi and g.geom_type == "Polygon" else g for g in polygons]
                data, masks = _fields(columns, rows)
                write(staged, shapely.to_wkb(np.array(geoms, dtype=object)), data, names, field_mask=masks,
                      layer=layers[1], driver="GPKG", geometry_type="MultiPolygon" if multi else "Polygon",
                      crs="EPSG:4326", layer_options={
                          **options, "DESCRIPTION": f"{name}: the rows whose site is a region, as polygons"})
        except OSError:
            raise
        except Exception as exc:  # noqa: BLE001 - GDAL's field/layer errors are about the table
            raise InputError(f"Cannot write the GeoPackage layer {name!r}: {exc}.") from exc
        _describe_columns(staged, layers, descriptor["resources"][0]["schema"]["fields"])
        os.replace(staged, path)
    finally:
        if staged.exists():
            staged.unlink()
