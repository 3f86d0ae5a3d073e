"""Site names to coordinates (points) or regions (polygons) through a user gazetteer.

A gazetteer is the user's own list of places: a CSV with a name column and
coordinates (in any form :mod:`envlink.locate.coords` reads) or WKT points and
polygons, a GeoPackage / shapefile / GeoJSON of points or polygons, or a
(Geo)DataFrame. Every source is read alike: polygons are regions, and an aliases
column (names separated by ``;`` or ``|``) gives each place other names it is
found by. A name is looked up exactly, then case- and accent-insensitively, then
fuzzily (rapidfuzz ``token_sort_ratio`` on the normalised names); two fuzzy
candidates within a margin of each other are reported as ambiguous and never picked.
"""

from __future__ import annotations

import math
import os
import re
import unicodedata
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import pandas as pd

from envlink.core.util import INVISIBLE_CHARS as _INVISIBLE
from envlink.errors import InputError
from envlink.locate._gazetteer_read import (
    _GEO_SUFFIXES,
    _entries_from_geo,
    _entries_from_table,
    _Entry,
)
from envlink.locate._gazetteer_read import ALIAS_COLUMNS as ALIAS_COLUMNS
from envlink.locate._gazetteer_read import COORDS_COLUMNS as COORDS_COLUMNS
from envlink.locate._gazetteer_read import LAT_COLUMNS as LAT_COLUMNS
from envlink.locate._gazetteer_read import LON_COLUMNS as LON_COLUMNS
from envlink.locate._gazetteer_read import NAME_COLUMNS as NAME_COLUMNS
from envlink.locate._gazetteer_read import PRECISION_COLUMNS as PRECISION_COLUMNS
from envlink.locate._gazetteer_read import WKT_COLUMNS as WKT_COLUMNS
from envlink.locate._polygons import DEGENERATE

__all__ = ["Gazetteer", "Match", "SiteNameError", "read_gazetteer", "normalise_name"]

MatchMethod = Literal["exact", "casefold", "fuzzy"]

_PUNCT = re.compile(r"[\W_]+", re.UNICODE)
_WHITE = re.compile(r"\s+", re.UNICODE)


def _plain_name(name: str) -> str:
    """A name without invisible characters, its white space (no-break too) one plain space."""
    return _WHITE.sub(" ", str(name).translate(_INVISIBLE)).strip()


class SiteNameError(InputError):
    """A site name that the gazetteer cannot resolve to one place.

    Attributes
    ----------
    field : str
        Always ``"site"``.
    reason : str
        Plain-words explanation, with the closest gazetteer name when there is one.
    code : str
        Short QA code: ``site_not_found``.
    """

    def __init__(self, value: str, reason: str, code: str = "site_not_found") -> None:
        self.field = "site"
        self.value = value
        self.reason = reason
        self.code = code
        super().__init__(value, reason, code)  # all three in args: pickles

    def __str__(self) -> str:
        return f"site {self.value!r}: {self.reason}"


@dataclass(frozen=True)
class Match:
    """The place a site name resolved to.

    Attributes
    ----------
    query : str
        The name as given.
    name : str or None
        The gazetteer name matched; None when the query was ambiguous.
    lat, lon : float
        WGS84 decimal degrees, lon in [-180, 180); NaN when ambiguous. For a polygon,
        a representative point that lies inside it (shapely ``representative_point``).
    wkt : str or None
        The polygon in lon/lat WGS84 as WKT, or None for a point site.
    method : {"exact", "casefold", "fuzzy"}
        How the name was matched.
    score : float
        100 for exact and casefold matches; the rapidfuzz score for fuzzy ones.
    candidates : tuple of (str, float)
        The gazetteer names considered (name, score), best first.
    flags : tuple of str
        QA codes: ``site_name_casefold``, ``site_name_fuzzy``, ``ambiguous_site_name``,
        plus any flag the gazetteer's own coordinate text raised (``swapped_lat_lon``).
    precision_km : float
        For a polygon, the radius of the circle of equal geodesic area, sqrt(area/π);
        for a point, the precision its coordinate text implies, or the gazetteer's
        precision column; NaN when unknown.
    notes : tuple of str
        Human sentences explaining each flag.
    """

    query: str
    name: str | None
    lat: float
    lon: float
    wkt: str | None
    method: MatchMethod
    score: float
    candidates: tuple[tuple[str, float], ...]
    flags: tuple[str, ...]
    precision_km: float
    notes: tuple[str, ...] = ()


def normalise_name(name: str) -> str:
    """Fold a site name for case- and accent-insensitive comparison.

    Unicode NFKD decomposition, combining marks dropped, ``casefold``, every run of
    punctuation or white space collapsed to one space.

    Examples
    --------
    >>> normalise_name("  Récif  d'Ossë-Nord ")
    'recif d osse nord'
    """
    decomposed = unicodedata.normalize("NFKD", str(name).translate(_INVISIBLE))
    stripped = "".join(ch for ch in decomposed if not unicodedata.combining(ch))
    return _PUNCT.sub(" ", stripped.casefold()).strip()


class Gazetteer:
    """Named places to look site names up in; build one with :func:`read_gazetteer`.

    Parameters
    ----------
    entries : sequence of _Entry
        The places (internal; use :func:`read_gazetteer`).
    source : str
        Where they came from, for messages.
    """

    def __init__(self, entries: Sequence[_Entry], source: str = "gazetteer") -> None:
        self.entries = tuple(entries)
        self.source = source
        self._exact: dict[str, list[_Entry]] = {}
        self._folded: dict[str, list[_Entry]] = {}
        for entry in self.entries:
            for known in (entry.name, *entry.aliases):  # a place is found by each of its names
                found = self._exact.setdefault(_plain_name(known), [])
                if entry not in found:
                    found.append(entry)
                folded = self._folded.setdefault(normalise_name(known), [])
                if entry not in folded:
                    folded.append(entry)
        self._keys = list(self._folded)

    def __len__(self) -> int:
        return len(self.entries)

    def __repr__(self) -> str:
        return f"<Gazetteer {self.source!r}: {len(self)} places>"

    @property
    def names(self) -> list[str]:
        """Gazetteer names, in file order."""
        return [e.name for e in self.entries]

    def match(self, name: str, *, threshold: float = 85.0, margin: float = 5.0) -> Match:
        """Resolve one site name.

        Parameters
        ----------
        name : str
            The name as reported.
        threshold : float, default 85
            Lowest rapidfuzz ``token_sort_ratio`` score (0-100) a fuzzy match may have.
        margin : float, default 5
            Fuzzy candidates (of distinct places) scoring within this many points of
            the best are ambiguous.

        Returns
        -------
        Match

        Raises
        ------
        SiteNameError
            No gazetteer name matches exactly, case-/accent-insensitively, or with a
            fuzzy score at or above ``threshold``; the message names the closest one.

        Examples
        --------
        >>> import pandas as pd
        >>> gz = read_gazetteer(pd.DataFrame({"name": ["Kestrel Reef"], "lat": [-8.5], "lon": [160.25]}))
        >>> m = gz.match("kestrel  reef")
        >>> (m.name, m.method, m.lat, m.lon, m.flags)
        ('Kestrel Reef', 'casefold', -8.5, 160.25, ('site_name_casefold',))
        """
        query = str(name).strip()
        found = self._exact.get(_plain_name(query))
        if found:
            return self._resolve(query, [(e, 100.0) for e in found], "exact")
        key = normalise_name(query)
        found = self._folded.get(key)
        if found:
            return self._resolve(query, [(e, 100.0) for e in found], "casefold")
        return self._fuzzy(query, key, threshold, margin)

    def _fuzzy(self, query: str, key: str, threshold: float, margin: float) -> Match:
        from rapidfuzz import fuzz, process

        scored = process.extract(key, self._keys, scorer=fuzz.token_sort_ratio, limit=10)
        near = [(k, float(s)) for k, s, _ in scored if s >= threshold]
        if not near:
            closest = (
                f"; the closest is {self._folded[scored[0][0]][0].name!r} "
                f"(score {scored[0][1]:.0f} < threshold {threshold:g})"
                if scored
                else ""
            )
            raise SiteNameError(query, f"not in {self.source}{closest}.")
        best = near[0][1]
        pairs = [(e, s) for k, s in near if s >= best - margin for e in self._folded[k]]
        return self._resolve(query, pairs, "fuzzy", all_near=near)

    def _resolve(
        self,
        query: str,
        pairs: list[tuple[_Entry, float]],
        method: MatchMethod,
        all_near: list[tuple[str, float]] | None = None,
    ) -> Match:
        places: list[tuple[_Entry, float]] = []
        for entry, score in pairs:
            if not any(entry.same_place(p) for p, _ in places):
                places.append((entry, score))
        cands = tuple((e.name, round(s, 1)) for e, s in pairs)
        if all_near is not None:
            cands = tuple((self._folded[k][0].name, round(s, 1)) for k, s in all_near)
        if len(places) > 1:
            listing = ", ".join(
                f"{e.name!r} (score {s:.0f}, {e.lat:.4f}, {e.lon:.4f})" for e, s in places
            )
            note = (
                f"site {query!r}: ambiguous; {len(places)} places in {self.source} match "
                f"equally well: {listing}; none was chosen, write the exact name."
            )
            return Match(
                query, None, math.nan, math.nan, None, method, places[0][1],
                cands, ("ambiguous_site_name",), math.nan, (note,),
            )
        entry, score = places[0]
        if entry.problem is not None:
            raise SiteNameError(query, f"{entry.problem}; fix it in {self.source}, or give the "
                                "site's coordinates.", DEGENERATE)
        flags = list(entry.flags)
        notes: list[str] = [f"site {query!r}: the polygon of {entry.name!r} {entry.note}."] if entry.note else []
        alias = next((a for a in entry.aliases if normalise_name(a) == normalise_name(query)
                      and normalise_name(entry.name) != normalise_name(query)), None)
        if alias is not None and method != "fuzzy":
            notes.append(f"site {query!r}: matched {entry.name!r} by its alias {alias!r}.")
        if method == "casefold":
            flags.insert(0, "site_name_casefold")
            notes.append(f"site {query!r}: matched {entry.name!r} ignoring case and accents.")
        elif method == "fuzzy":
            flags.insert(0, "site_name_fuzzy")
            notes.append(f"site {query!r}: matched {entry.name!r} by spelling (score {score:.0f}).")
        if "polygon_spans_antimeridian" in entry.flags:
            notes.append(
                f"site {query!r}: the polygon of {entry.name!r} spans more than 180° of longitude; "
                "it was kept as given, but a region crossing ±180° must be split there into a "
                "MultiPolygon to mean the small region."
            )
        elif entry.flags and not entry.note:
            notes.append(
                f"site {query!r}: the gazetteer's coordinates for {entry.name!r} were "
                f"flagged {', '.join(entry.flags)}."
            )
        return Match(
            query, entry.name, entry.lat, entry.lon, entry.wkt, method, score,
            cands, tuple(flags), entry.precision_km, tuple(notes),
        )


def _nonempty(entries: Sequence[_Entry], label: str) -> Gazetteer:
    if not entries:
        raise InputError(
            f"Gazetteer {label} holds no sites (no data rows); every site name would be "
            "'not found'. Check that the file is the right one and has rows below its header."
        )
    return Gazetteer(entries, label)


def read_gazetteer(
    source: str | os.PathLike[str] | pd.DataFrame,
    *,
    name_col: str | None = None,
    lat_col: str | None = None,
    lon_col: str | None = None,
    coords_col: str | None = None,
    precision_col: str | None = None,
    wkt_col: str | None = None,
    aliases_col: str | None = None,
    repair_polygons: bool = True,
) -> Gazetteer:
    """Read a gazetteer of named sites (points or polygons).

    Parameters
    ----------
    source : path-like or DataFrame or GeoDataFrame
        A CSV / TSV / Excel / Parquet table with a name column and coordinates
        (``lat``/``lon`` columns, or one ``coords`` column, in any form
        :func:`envlink.parse_coordinates` reads, or a ``wkt`` column of WKT points and
        polygons in WGS84 lon/lat); a GeoPackage, shapefile or GeoJSON of points or
        polygons (read with geopandas' pyogrio engine; reprojected to WGS84 lon/lat if
        it has another CRS); or a DataFrame / GeoDataFrame. A polygon is a region
        whichever the source: the site gets the polygon, a point inside it and, as its
        precision, the radius of the circle of equal area. A point written both as
        coordinates and as WKT takes the written coordinates (and the precision their
        digits imply).
    name_col, lat_col, lon_col, coords_col, precision_col, wkt_col, aliases_col : str, optional
        Column names; by default they are recognised among common names
        (``site``/``name``..., ``lat``/``latitude``..., ``lon``/``longitude``...,
        ``coords``..., ``precision_km``, ``wkt``/``geometry``...,
        ``aliases``/``alias``...), case-insensitively. An aliases cell holds other
        names of the place, separated by ``;`` or ``|``; a site is found by any of them.
    repair_polygons : bool, default True
        Repair a polygon that is not valid (one that crosses itself) with shapely's
        ``make_valid``, flagging its rows ``polygon_repaired``; when False, such a
        polygon is not used. A polygon with no area is never used. A row naming a
        place that is not used is rejected (``site_polygon_degenerate``, the reason in
        its note); the gazetteer's other places stay usable.

    Returns
    -------
    Gazetteer

    Raises
    ------
    InputError
        Unreadable file, no name or coordinate column, a blank name, unreadable
        coordinates, or a geometry that is neither a point nor a polygon; the
        message names the file, the row and the reason.

    Examples
    --------
    >>> import pandas as pd
    >>> gz = read_gazetteer(pd.DataFrame({"Site": ["Ossel Bank"], "coords": ["8°30'S 160°15'E"]}))
    >>> m = gz.match("Ossel Bank")
    >>> (m.lat, m.lon, m.method)
    (-8.5, 160.25, 'exact')
    """
    try:
        import geopandas as gpd
    except ImportError:  # pragma: no cover - geopandas is a runtime dependency
        gpd = None
    if isinstance(source, pd.DataFrame):
        label = "(table)"
        if gpd is not None and isinstance(source, gpd.GeoDataFrame):
            return _nonempty(_entries_from_geo(source, label, name_col, precision_col, aliases_col,
                                               repair_polygons), label)
        return _nonempty(
            _entries_from_table(source, label, name_col, lat_col, lon_col, coords_col, precision_col,
                                wkt_col, aliases_col, repair_polygons),
            label,
        )
    path = Path(source)
    label = repr(str(path))
    if not path.exists():
        raise InputError(f"Cannot read gazetteer {label}: no such file.")
    if path.suffix.lower() in _GEO_SUFFIXES:
        try:
            gdf = gpd.read_file(path, engine="pyogrio")  # type: ignore[union-attr]
        except Exception as exc:  # noqa: BLE001 - any reader failure is the user's file
            raise InputError(f"Cannot read gazetteer {label}: {exc}") from exc
        return _nonempty(_entries_from_geo(gdf, label, name_col, precision_col, aliases_col, repair_polygons),
                         label)
    from envlink.tables import read_table

    table = read_table(path, as_text=True)
    return _nonempty(
        _entries_from_table(table, label, name_col, lat_col, lon_col, coords_col, precision_col,
                            wkt_col, aliases_col, repair_polygons),
        label,
    )
