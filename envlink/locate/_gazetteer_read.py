"""Gazetteer readers: a table or a GIS layer of named places to place entries.

Private to :mod:`envlink.locate.gazetteer`, whose :func:`read_gazetteer` picks the reader.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from envlink._util import did_you_mean
from envlink.errors import InputError

#: Column names recognised automatically (compared case-insensitively), in order of preference.
NAME_COLUMNS = ("site", "site_name", "sitename", "name", "reef", "locality", "location", "place", "station")
LAT_COLUMNS = ("lat", "latitude", "site_lat", "decimal_latitude", "decimallatitude", "lat_dd", "y")
LON_COLUMNS = ("lon", "long", "longitude", "lng", "site_lon", "decimal_longitude", "decimallongitude", "lon_dd", "x")
COORDS_COLUMNS = ("coords", "coordinates", "coord", "position", "latlon", "lat_lon")
PRECISION_COLUMNS = ("precision_km", "site_precision_km", "uncertainty_km")

_GEO_SUFFIXES = (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gml", ".kml")


@dataclass(frozen=True)
class _Entry:
    name: str
    lat: float
    lon: float
    wkt: str | None
    precision_km: float
    flags: tuple[str, ...]

    def same_place(self, other: _Entry) -> bool:
        return (self.lat, self.lon, self.wkt) == (other.lat, other.lon, other.wkt)


def _pick(columns: Sequence[str], given: str | None, choices: Sequence[str], source: str) -> str | None:
    if given is not None:
        if given not in columns:
            raise InputError(
                f"Gazetteer {source} has no column {given!r}.{did_you_mean(given, columns)} "
                f"Columns: {', '.join(repr(c) for c in columns)}."
            )
        return given
    lowered = {str(c).strip().lower(): c for c in columns}
    for choice in choices:
        if choice in lowered:
            return lowered[choice]
    return None


def _wrap_lon(lon: float) -> float:
    lon = float(lon)
    return lon if -180.0 <= lon < 180.0 else (lon + 180.0) % 360.0 - 180.0


def _entries_from_table(df: pd.DataFrame, source: str, name_col: str | None, lat_col: str | None,
                        lon_col: str | None, coords_col: str | None, precision_col: str | None) -> list[_Entry]:
    from envlink.locate.coords import CoordinateError, parse_coordinates, parse_lat_lon

    cols = [str(c) for c in df.columns]
    df = df.set_axis(cols, axis=1)
    name = _pick(cols, name_col, NAME_COLUMNS, source)
    lat = _pick(cols, lat_col, LAT_COLUMNS, source)
    lon = _pick(cols, lon_col, LON_COLUMNS, source)
    coords = _pick(cols, coords_col, COORDS_COLUMNS, source) if not (lat and lon) else None
    prec = _pick(cols, precision_col, PRECISION_COLUMNS, source)
    listing = ", ".join(repr(c) for c in cols)
    if name is None:
        raise InputError(
            f"Gazetteer {source} has no site-name column (looked for {', '.join(NAME_COLUMNS)}); "
            f"name it with name_col= (--gazetteer-name). Columns: {listing}."
        )
    if not ((lat and lon) or coords):
        raise InputError(
            f"Gazetteer {source} has no coordinate columns (looked for latitude/longitude "
            f"columns such as 'lat'/'lon', or a 'coords' column); name them with "
            f"lat_col=/lon_col=. Columns: {listing}."
        )
    entries: list[_Entry] = []
    for i, row in enumerate(df.itertuples(index=False, name=None)):
        rec = dict(zip(cols, row, strict=True))
        texts = [_text(rec[c]) for c in (name, lat, lon, coords) if c]
        if all(t == "" for t in texts):
            continue  # a blank line in a spreadsheet
        site = _text(rec[name])
        where = f"Gazetteer {source} row {i + 1}"
        if not site:
            raise InputError(f"{where}: the site name ({name!r}) is blank.")
        try:
            if lat and lon:
                c = parse_lat_lon(_text(rec[lat]), _text(rec[lon]))
            else:
                c = parse_coordinates(_text(rec[coords]))  # type: ignore[index]
        except CoordinateError as exc:
            raise InputError(f"{where} (site {site!r}): {exc.field}: {exc.reason}") from exc
        precision = c.precision_km
        if prec is not None and _text(rec[prec]):
            try:
                precision = float(_text(rec[prec]).replace(",", "."))
            except ValueError:
                raise InputError(
                    f"{where} (site {site!r}): precision {_text(rec[prec])!r} in column "
                    f"{prec!r} is not a number of km."
                ) from None
        entries.append(_Entry(site, float(c.lat), _wrap_lon(c.lon), None, float(precision), tuple(c.flags)))
    return entries


def _text(value: Any) -> str:
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    return str(value).strip()


def _entries_from_geo(gdf: Any, source: str, name_col: str | None, precision_col: str | None) -> list[_Entry]:
    from pyproj import Geod

    cols = [str(c) for c in gdf.columns if c != gdf.geometry.name]
    name = _pick(cols, name_col, NAME_COLUMNS, source)
    if name is None:
        raise InputError(
            f"Gazetteer {source} has no site-name column (looked for {', '.join(NAME_COLUMNS)}); "
            f"name it with name_col=. Columns: {', '.join(repr(c) for c in cols)}."
        )
    prec = _pick(cols, precision_col, PRECISION_COLUMNS, source)
    if gdf.crs is None:
        bounds = gdf.total_bounds
        if np.isfinite(bounds).all() and (abs(bounds[1]) > 90 or abs(bounds[3]) > 90):
            raise InputError(
                f"Gazetteer {source} states no coordinate reference system and its "
                f"coordinates are not degrees (y from {bounds[1]:g} to {bounds[3]:g}); "
                "set its CRS (for example with geopandas' set_crs) and try again."
            )
    elif not gdf.crs.equals("EPSG:4326"):
        gdf = gdf.to_crs("EPSG:4326")
    geod = Geod(ellps="WGS84")
    entries: list[_Entry] = []
    for i, (site_value, geom) in enumerate(zip(gdf[name], gdf.geometry, strict=True)):
        site = _text(site_value)
        where = f"Gazetteer {source} feature {i + 1}"
        if not site:
            raise InputError(f"{where}: the site name ({name!r}) is blank.")
        if geom is None or geom.is_empty:
            raise InputError(f"{where} (site {site!r}): the geometry is empty.")
        precision = math.nan
        if prec is not None and _text(gdf[prec].iloc[i]):
            try:
                precision = float(_text(gdf[prec].iloc[i]).replace(",", "."))
            except ValueError:
                raise InputError(
                    f"{where} (site {site!r}): precision {_text(gdf[prec].iloc[i])!r} in column "
                    f"{prec!r} is not a number of km."
                ) from None
        _, miny, _, maxy = geom.bounds
        if not (-90.0 <= miny and maxy <= 90.0):
            raise InputError(
                f"{where} (site {site!r}): latitude {miny if miny < -90 else maxy:g} is beyond ±90; "
                "is the file's coordinate reference system stated correctly?"
            )
        kind = geom.geom_type
        if kind == "Point":
            entries.append(_Entry(site, float(geom.y), _wrap_lon(geom.x), None, precision, ()))
        elif kind in ("Polygon", "MultiPolygon"):
            point = geom.representative_point()
            area, _ = geod.geometry_area_perimeter(geom)
            radius = math.sqrt(abs(area) / math.pi) / 1000.0
            # a part wider than half the globe: most likely a region drawn across ±180° as one
            # ring (a MultiPolygon split at ±180° has narrow parts and is fine)
            parts = getattr(geom, "geoms", [geom])
            widest = max(p.bounds[2] - p.bounds[0] for p in parts)
            wide = ("polygon_spans_antimeridian",) if widest > 180.0 else ()
            entries.append(_Entry(site, float(point.y), _wrap_lon(point.x), geom.wkt, radius, wide))
        else:
            raise InputError(
                f"{where} (site {site!r}): a {kind} is not a site; expected points or polygons."
            )
    return entries
