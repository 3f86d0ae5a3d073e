"""Row resolution for the locate stage: one row's cells to a site and a period, cached.

Private to :mod:`envlink.locate.sites`, whose :func:`locate` drives a resolver over a table.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from envlink.core.util import INVISIBLE_CHARS as _INVISIBLE
from envlink.errors import InputError
from envlink.locate.gazetteer import Gazetteer
from envlink.tables import cell_text

#: Plain-words meaning of the QA codes the locate stage sets itself (used in notes).
FLAG_MEANINGS: dict[str, str] = {
    "site_missing": "no latitude/longitude, coordinates or site name in this row",
    "incomplete_lat_lon": "only one of latitude and longitude is filled in; the next source was used",
    "lat_missing": "the longitude is filled in but the latitude is blank",
    "lon_missing": "the latitude is filled in but the longitude is blank",
    "period_missing": "no period in this row (blank or marked missing)",
    "swapped_lat_lon": "latitude and longitude were written the other way round and were swapped",
    "site_name_casefold": "the site name matched the gazetteer only when case and accents are ignored",
    "site_name_fuzzy": "the site name matched a gazetteer name by spelling similarity",
    "ambiguous_site_name": "several gazetteer places match the site name equally well; none was chosen",
    "site_not_found": "the site name is not in the gazetteer",
    "unexpected_error": "envlink failed on this value (a bug; the note says how)",
}

Hemisphere = Literal["north", "south"]


@dataclass(frozen=True)
class _Site:
    lat: float = np.nan
    lon: float = np.nan
    precision_km: float = np.nan
    wkt: str | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    rejected: bool = False


@dataclass(frozen=True)
class _When:
    start: str | None = None
    end: str | None = None
    precision: str | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    rejected: bool = False


#: Invisible format characters that copy-paste from PDFs and web pages leaves in
#: cells (zero-width space / joiners, word joiner, BOM, soft hyphen, direction marks).


def _text(value: Any) -> str:
    """A cell as the text the user wrote ('' for an empty cell).

    Typed cells (Parquet, Excel) are written as a person would: ``2001.0`` as
    ``'2001'``, a midnight timestamp as its ISO date.
    """
    return cell_text(value)


def _plain(value: Any) -> str:
    """A coordinate or date cell as text, without invisible format characters."""
    return cell_text(value).translate(_INVISIBLE)


def _explain(flags: Sequence[str], where: str, given: Sequence[str] = (),
             meanings: Mapping[str, str] = FLAG_MEANINGS) -> tuple[str, ...]:
    if given:
        return tuple(f"{where}: {note}" for note in given)
    return tuple(f"{where}: {meanings.get(f, f.replace('_', ' '))}." for f in flags)


def _error_flag(exc: InputError, fallback: str) -> tuple[str, str]:
    code = str(getattr(exc, "code", "") or f"{fallback}_unreadable")
    reason = str(getattr(exc, "reason", "") or exc)
    return code, reason


class _Resolver:
    """Per-distinct-text caches around the parsers for one :func:`locate` call."""

    def __init__(self, cols: Mapping[str, str | None], gazetteer: Gazetteer | None,
                 period_options: dict[str, Any], threshold: float, margin: float) -> None:
        from envlink.locate import coords, periods

        self.coords, self.periods = coords, periods
        self.coord_meanings = {**FLAG_MEANINGS, **getattr(coords, "COORDINATE_FLAGS", {})}
        self.cols = cols
        self.gazetteer = gazetteer
        self.period_options = period_options
        self.threshold, self.margin = threshold, margin
        self._site_cache: dict[Hashable, _Site] = {}
        self._when_cache: dict[Hashable, _When] = {}

    def blank(self, text: str) -> bool:
        return text.strip() == "" or bool(self.periods.is_missing(text))

    def _cached(self, cache: dict[Hashable, Any], key: Hashable, make: Callable[[], Any],
                blank: Callable[..., Any], where: str) -> Any:
        hit = cache.get(key)
        if hit is None:
            try:
                hit = make()
            except Exception as exc:  # noqa: BLE001 - one odd cell must not stop the table
                note = (f"{where}: envlink could not read this value ({type(exc).__name__}: {exc}); "
                        "this is a bug in envlink, please report it with the value")
                hit = blank(flags=("unexpected_error",), notes=(note,), rejected=True)
            cache[key] = hit
        return hit

    # -- sites -------------------------------------------------------------------------
    def site(self, lat: str, lon: str, coords: str, name: str) -> _Site | None:
        c = self.cols
        have_sources = any(c[k] for k in ("lat", "coords", "site"))
        if not have_sources:
            return None
        lat_blank, lon_blank = self.blank(lat), self.blank(lon)
        extra: tuple[str, ...] = ()
        if c["lat"] and not (lat_blank and lon_blank):
            if not lat_blank and not lon_blank:
                return self._cached(self._site_cache, ("ll", lat, lon), lambda: self._lat_lon(lat, lon),
                                    _Site, f"{c['lat']!r}/{c['lon']!r} = {lat!r}/{lon!r}")
            later = (c["coords"] and not self.blank(coords)) or (c["site"] and not self.blank(name))
            code = "lon_missing" if lon_blank else "lat_missing"
            where = f"{c['lat']!r}/{c['lon']!r} = {lat!r}/{lon!r}"
            if not later:
                return _Site(flags=(code,), notes=_explain([code], where), rejected=True)
            extra = ("incomplete_lat_lon",)
        if c["coords"] and not self.blank(coords):
            got = self._cached(self._site_cache, ("cc", coords), lambda: self._coords(coords),
                               _Site, f"{c['coords']!r} = {coords!r}")
        elif c["site"] and not self.blank(name):
            got = self._cached(self._site_cache, ("gz", name), lambda: self._name(name),
                               _Site, f"{c['site']!r} = {name!r}")
        else:
            named = "/".join(repr(c[k]) for k in ("lat", "lon", "coords", "site") if c[k])
            return _Site(flags=("site_missing",), notes=_explain(["site_missing"], f"{named} all blank"),
                         rejected=True)
        if extra:
            where = f"{c['lat']!r}/{c['lon']!r} = {lat!r}/{lon!r}"
            got = _Site(got.lat, got.lon, got.precision_km, got.wkt, extra + got.flags,
                        _explain(extra, where) + got.notes, got.rejected)
        return got

    def _from_coordinate(self, value: Any, where: str) -> _Site:
        lon = float(value.lon)
        if not -180.0 <= lon < 180.0:  # the parser promises [-180, 180); make sure of it
            lon = (lon + 180.0) % 360.0 - 180.0
        return _Site(float(value.lat), lon, float(value.precision_km), None,
                     tuple(value.flags), _explain(value.flags, where, meanings=self.coord_meanings))

    def _lat_lon(self, lat: str, lon: str) -> _Site:
        c = self.cols
        try:
            value = self.coords.parse_lat_lon(lat, lon)
        except InputError as exc:
            code, reason = _error_flag(exc, "lat_lon")
            field = getattr(exc, "field", "")
            col, text = (c["lon"], lon) if field == "lon" else (c["lat"], lat)
            if field not in ("lat", "lon"):
                col, text = f"{c['lat']}/{c['lon']}", f"{lat}/{lon}"
            return _Site(flags=(code,), notes=(f"{col!r} = {text!r}: {reason}",), rejected=True)
        return self._from_coordinate(value, f"{c['lat']!r}/{c['lon']!r} = {lat!r}/{lon!r}")

    def _coords(self, text: str) -> _Site:
        col = self.cols["coords"]
        try:
            value = self.coords.parse_coordinates(text)
        except InputError as exc:
            code, reason = _error_flag(exc, "coords")
            return _Site(flags=(code,), notes=(f"{col!r} = {text!r}: {reason}",), rejected=True)
        return self._from_coordinate(value, f"{col!r} = {text!r}")

    def _name(self, name: str) -> _Site:
        col = self.cols["site"]
        assert self.gazetteer is not None
        try:
            m = self.gazetteer.match(name, threshold=self.threshold, margin=self.margin)
        except InputError as exc:
            code, reason = _error_flag(exc, "site")
            return _Site(flags=(code,), notes=(f"{col!r} = {name!r}: {reason}",), rejected=True)
        notes = tuple(f"{col!r} = {n[len('site '):]}" if n.startswith("site ") else n for n in m.notes)
        return _Site(m.lat, m.lon, m.precision_km, m.wkt, m.flags,
                     notes or _explain(m.flags, f"{col!r} = {name!r}"))

    # -- periods -----------------------------------------------------------------------
    def when(self, period: str, start: str, end: str, hemisphere: Hemisphere | None) -> _When | None:
        c = self.cols
        if c["period"]:
            key: Hashable = ("p", period, hemisphere)
            return self._cached(self._when_cache, key, lambda: self._period(period, hemisphere),
                                _When, f"{c['period']!r} = {period!r}")
        if c["start"]:
            key = ("se", start, end, hemisphere)
            return self._cached(self._when_cache, key, lambda: self._columns(start, end, hemisphere),
                                _When, f"{c['start']!r}/{c['end']!r} = {start!r}/{end!r}")
        return None

    def _finish(self, value: Any, where: str) -> _When:
        if value is None:
            return _When(flags=("period_missing",), notes=_explain(["period_missing"], where))
        flags = tuple(value.flags)
        start = value.start.isoformat() if value.start is not None else None
        end = value.end.isoformat() if value.end is not None else None
        precision = value.precision if (start or end) else None  # no window, no precision
        return _When(start, end, precision, flags, _explain(flags, where, tuple(value.notes)))

    def _period(self, text: str, hemisphere: Hemisphere | None) -> _When:
        col = self.cols["period"]
        try:
            value = self.periods.parse_period(text, hemisphere=hemisphere, **self.period_options)
        except InputError as exc:
            code, reason = _error_flag(exc, "period")
            return _When(flags=(code,), notes=(f"{col!r} = {text!r}: {reason}",), rejected=True)
        return self._finish(value, f"{col!r} = {text!r}")

    def _columns(self, start: str, end: str, hemisphere: Hemisphere | None) -> _When:
        c = self.cols
        where = f"{c['start']!r}/{c['end']!r} = {start!r}/{end!r}"
        try:
            value = self.periods.parse_period_columns(start, end, hemisphere=hemisphere, **self.period_options)
        except InputError as exc:
            code, reason = _error_flag(exc, "period")
            field = getattr(exc, "field", "")
            if field == "start":
                where = f"{c['start']!r} = {start!r}"
            elif field == "end":
                where = f"{c['end']!r} = {end!r}"
            return _When(flags=(code,), notes=(f"{where}: {reason}",), rejected=True)
        return self._finish(value, where)
