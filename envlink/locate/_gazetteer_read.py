"""Gazetteer readers: a table or a GIS layer of named places to place entries.

Private to :mod:`envlink.locate.gazetteer`, whose :func:`read_gazetteer` picks the reader.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.util import did_you_mean
from envlink.errors import InputError
from envlink.locate._polygons import check_polygon

#: Column names recognised automatically (compared case-insensitively), in order of preference.
NAME_COLUMNS = ("site", "site_name", "sitename", "name", "reef", "locality", "location", "place", "station")
LAT_COLUMNS = ("lat", "latitude", "site_lat", "decimal_latitude", "decimallatitude", "lat_dd", "y")
LON_COLUMNS = ("lon", "long", "longitude", "lng", "site_lon", "decimal_longitude", "decimallongitude", "lon_dd", "x")
COORDS_COLUMNS = ("coords", "coordinates", "coord", "position", "latlon", "lat_lon")
PRECISION_COLUMNS = ("precision_km", "site_precision_km", "uncertainty_km")
ALIAS_COLUMNS = ("aliases", "alias", "other_names", "alternative_names", "alt_names")
WKT_COLUMNS = ("wkt", "geometry", "geom", "site_wkt", "shape")
#: Separators between the names of an aliases cell.
ALIAS_SEPARATORS = re.compile(r"\s*[;|]\s*")

_GEO_SUFFIXES = (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gml", ".kml")


@dataclass(frozen=True)
class _Entry:
    name: str
    lat: float
    lon: float
    wkt: str | None
    precision_km: float
    flags: tuple[str, ...]
    aliases: tuple[str, ...] = ()
    note: str | None = None  # how the place was repaired (envlink.locate._polygons)
    problem: str | None = None  # why the place cannot be used: rows naming it are rejected

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


@dataclass(frozen=True)
class _Columns:
    """The columns of a gazetteer table: name, coordinates, WKT, precision, aliases."""

    name: str
    lat: str | None
    lon: str | None
    coords: str | None
    wkt: str | None
    prec: str | None
    aliases: str | None


def _table_columns(cols: list[str], source: str, name_col: str | None, lat_col: str | None,
                   lon_col: str | None, coords_col: str | None, precision_col: str | None,
                   wkt_col: str | None, aliases_col: str | None) -> _Columns:
    name = _pick(cols, name_col, NAME_COLUMNS, source)
    lat = _pick(cols, lat_col, LAT_COLUMNS, source)
    lon = _pick(cols, lon_col, LON_COLUMNS, source)
    coords = _pick(cols, coords_col, COORDS_COLUMNS, source) if not (lat and lon) else None
    wkt = _pick(cols, wkt_col, WKT_COLUMNS, source)
    listing = ", ".join(repr(c) for c in cols)
    if name is None:
        raise InputError(
            f"Gazetteer {source} has no site-name column (looked for {', '.join(NAME_COLUMNS)}); "
            f"name it with name_col='COLUMN'. Columns: {listing}."
        )
    if not ((lat and lon) or coords or wkt):
        raise InputError(
            f"Gazetteer {source} has no coordinate columns (looked for latitude/longitude "
            f"columns such as 'lat'/'lon', a 'coords' column or a 'wkt' column); name them with "
            f"lat_col=/lon_col=. Columns: {listing}."
        )
    return _Columns(name, lat if lat and lon else None, lon if lat and lon else None, coords, wkt,
                    _pick(cols, precision_col, PRECISION_COLUMNS, source),
                    _pick(cols, aliases_col, ALIAS_COLUMNS, source))


def split_aliases(text: str) -> tuple[str, ...]:
    """The names of an aliases cell, separated by ``;`` or ``|``.

    Examples
    --------
    >>> split_aliases("Amberlet; Amber Reef | the Amber")
    ('Amberlet', 'Amber Reef', 'the Amber')
    """
    return tuple(a for a in ALIAS_SEPARATORS.split(text.strip()) if a)


def _precision(value: Any, column: str | None, where: str, default: float) -> float:
    text = _text(value) if column is not None else ""
    if not text:
        return default
    try:
        return float(text.replace(",", "."))
    except ValueError:
        raise InputError(f"{where}: precision {text!r} in column {column!r} is not a number of km.") from None


def _entries_from_table(df: pd.DataFrame, source: str, name_col: str | None, lat_col: str | None,
                        lon_col: str | None, coords_col: str | None, precision_col: str | None,
                        wkt_col: str | None = None, aliases_col: str | None = None,
                        repair: bool = True) -> list[_Entry]:
    """Places of a table: coordinates in any written form, or WKT points and polygons (lon/lat WGS84)."""
    cols = [str(c) for c in df.columns]
    df = df.set_axis(cols, axis=1)
    c = _table_columns(cols, source, name_col, lat_col, lon_col, coords_col, precision_col, wkt_col, aliases_col)
    entries: list[_Entry] = []
    for i, row in enumerate(df.itertuples(index=False, name=None)):
        rec = dict(zip(cols, row, strict=True))
        if all(_text(rec[k]) == "" for k in (c.name, c.lat, c.lon, c.coords, c.wkt) if k):
            continue  # a blank line in a spreadsheet
        site = _text(rec[c.name])
        where = f"Gazetteer {source} row {i + 1}"
        if not site:
            raise InputError(f"{where}: the site name ({c.name!r}) is blank.")
        entry = _row_entry(rec, c, site, f"{where} (site {site!r})", repair)
        aliases = split_aliases(_text(rec[c.aliases])) if c.aliases else ()
        entries.append(dataclasses.replace(entry, aliases=aliases))
    return entries


def _row_entry(rec: dict[str, Any], c: _Columns, site: str, where: str, repair: bool = True) -> _Entry:
    """One table row's place: a WKT polygon as a region; else the written coordinates."""
    from envlink.locate.coords import CoordinateError, parse_coordinates, parse_lat_lon

    geom = _wkt_geometry(_text(rec[c.wkt]), c.wkt, where) if c.wkt else None
    written = (c.lat and c.lon and _text(rec[c.lat]) and _text(rec[c.lon])) or (c.coords and _text(rec[c.coords]))
    if geom is not None and (geom.geom_type != "Point" or not written):
        precision = _precision(rec[c.prec] if c.prec else None, c.prec, where, math.nan)
        return _geometry_entry(site, geom, precision, where, repair=repair)
    try:
        if c.lat and c.lon:
            xy = parse_lat_lon(_text(rec[c.lat]), _text(rec[c.lon]))
        else:
            xy = parse_coordinates(_text(rec[c.coords]) if c.coords else "")
    except CoordinateError as exc:
        raise InputError(f"{where}: {exc.field}: {exc.reason}") from exc
    precision = _precision(rec[c.prec] if c.prec else None, c.prec, where, xy.precision_km)
    return _Entry(site, float(xy.lat), _wrap_lon(xy.lon), None, float(precision), tuple(xy.flags))


def _wkt_geometry(text: str, column: str | None, where: str) -> Any:
    """The shapely geometry of a WKT cell (None when blank)."""
    if not text:
        return None
    import shapely

    try:
        return shapely.from_wkt(text)
    except shapely.errors.GEOSException as exc:
        raise InputError(
            f"{where}: column {column!r} holds {text[:60]!r}, which is not WKT ({exc}); expected "
            "e.g. 'POLYGON ((lon lat, lon lat, ...))' or 'POINT (lon lat)' in WGS84 degrees."
        ) from None


def _text(value: Any) -> str:
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    return str(value).strip()


def _entries_from_geo(gdf: Any, source: str, name_col: str | None, precision_col: str | None,
                      aliases_col: str | None = None, repair: bool = True) -> list[_Entry]:
    cols = [str(c) for c in gdf.columns if c != gdf.geometry.name]
    name = _pick(cols, name_col, NAME_COLUMNS, source)
    if name is None:
        raise InputError(
            f"Gazetteer {source} has no site-name column (looked for {', '.join(NAME_COLUMNS)}); "
            f"name it with name_col='COLUMN'. Columns: {', '.join(repr(c) for c in cols)}."
        )
    prec = _pick(cols, precision_col, PRECISION_COLUMNS, source)
    alias_col = _pick(cols, aliases_col, ALIAS_COLUMNS, source)
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
    entries: list[_Entry] = []
    for i, (site_value, geom) in enumerate(zip(gdf[name], gdf.geometry, strict=True)):
        site = _text(site_value)
        where = f"Gazetteer {source} feature {i + 1}"
        if not site:
            raise InputError(f"{where}: the site name ({name!r}) is blank.")
        label = f"{where} (site {site!r})"
        precision = _precision(gdf[prec].iloc[i] if prec else None, prec, label, math.nan)
        entry = _geometry_entry(site, geom, precision, label, repair=repair)
        aliases = split_aliases(_text(gdf[alias_col].iloc[i])) if alias_col else ()
        entries.append(dataclasses.replace(entry, aliases=aliases))
    return entries


def _geometry_entry(site: str, geom: Any, precision: float, where: str, *, repair: bool = True) -> _Entry:
    """A point (``precision`` km), or a polygon as a region: a point inside it and, as its
    precision, the radius of the circle of equal geodesic area (lon/lat WGS84).

    A polygon is checked first (:func:`envlink.locate._polygons.check_polygon`): an
    invalid one is repaired (flagged) or, like one with no area, kept as an entry with
    the reason it cannot be used (rows naming it are rejected)."""
    from pyproj import Geod

    if geom is None or geom.is_empty:
        raise InputError(f"{where}: the geometry is empty.")
    _, miny, _, maxy = geom.bounds
    if not (-90.0 <= miny and maxy <= 90.0):
        raise InputError(
            f"{where}: latitude {miny if miny < -90 else maxy:g} is beyond ±90; is the file's coordinate "
            "reference system stated correctly (WKT in a table is lon/lat WGS84 degrees, longitude first)?"
        )
    kind = geom.geom_type
    if kind == "Point":
        return _Entry(site, float(geom.y), _wrap_lon(geom.x), None, precision, ())
    if kind not in ("Polygon", "MultiPolygon"):
        raise InputError(f"{where}: a {kind} is not a site; expected points or polygons.")
    checked = check_polygon(geom, repair=repair)
    if checked.problem is not None:
        return _Entry(site, math.nan, math.nan, None, math.nan, (),
                      problem=f"the polygon of {site!r} ({where}) {checked.problem}")
    geom = checked.geometry
    point = geom.representative_point()
    area, _ = Geod(ellps="WGS84").geometry_area_perimeter(geom)
    radius = math.sqrt(abs(area) / math.pi) / 1000.0
    # a part wider than half the globe: most likely a region drawn across ±180° as one
    # ring (a MultiPolygon split at ±180° has narrow parts and is fine)
    parts = getattr(geom, "geoms", [geom])
    widest = max(p.bounds[2] - p.bounds[0] for p in parts)
    wide = ("polygon_spans_antimeridian",) if widest > 180.0 else ()
    return _Entry(site, float(point.y), _wrap_lon(point.x), geom.wkt, radius, checked.flags + wide,
                  note=checked.note)
