"""The locate stage: a table of reported places and dates to validated sites and periods.

:func:`locate` reads, row by row, separate latitude/longitude cells, a single
coordinates cell, or a site name looked up in a gazetteer (in that order, the first
non-blank source wins), and a period (one cell, or start and end cells). It returns
a new table with every input row and column unchanged plus the columns of
``OUTPUT_COLUMNS``; a value that cannot be read rejects the row with a QA flag and
a note, it never raises.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Hashable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd

from envlink.errors import InputError, param_error
from envlink.locate.gazetteer import Gazetteer, read_gazetteer
from envlink.tables import cell_text, require_columns

__all__ = ["locate", "OUTPUT_COLUMNS", "FLAG_MEANINGS", "Status"]

Status = Literal["ok", "flagged", "rejected"]

#: Columns :func:`locate` adds, in this order.
OUTPUT_COLUMNS = (
    "site_lat",
    "site_lon",
    "site_precision_km",
    "site_wkt",
    "period_start",
    "period_end",
    "period_precision",
    "locate_status",
    "locate_flags",
    "locate_notes",
)

#: Plain-words meaning of the QA codes this module sets itself (used in notes).
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

Order = Literal["dayfirst", "monthfirst"]
PlainSeasonSouth = Literal["ambiguous", "austral", "boreal"]
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
_INVISIBLE = dict.fromkeys(map(ord, "\u200b\u200c\u200d\u2060\ufeff\u00ad\u200e\u200f"))


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


def _check_options(table: Any, cols: dict[str, str | None], gazetteer: Any, order: Any,
                   plain_season_south: Any) -> None:
    if not isinstance(table, pd.DataFrame):
        raise param_error("table", "locate", "a pandas DataFrame", type(table).__name__)
    if bool(cols["lat"]) != bool(cols["lon"]):
        missing = "lon" if cols["lat"] else "lat"
        raise InputError(f"locate: 'lat' and 'lon' go together; {missing!r} was not given.")
    if cols["period"] and (cols["start"] or cols["end"]):
        raise InputError("locate: give either 'period' (one column) or 'start' and 'end', not both.")
    if bool(cols["start"]) != bool(cols["end"]):
        missing = "end" if cols["start"] else "start"
        raise InputError(f"locate: 'start' and 'end' go together; {missing!r} was not given.")
    if not any(cols.values()):
        raise InputError(
            "locate: no column to read; give lat= and lon=, coords=, site= (with gazetteer=), "
            "period= or start= and end=."
        )
    if cols["site"] and gazetteer is None:
        raise param_error("gazetteer", "locate", "a gazetteer (path, DataFrame or Gazetteer) when site= is given", None)
    if order not in (None, "dayfirst", "monthfirst"):
        raise param_error("order", "locate", "None, 'dayfirst' or 'monthfirst'", order)
    if plain_season_south not in ("ambiguous", "austral", "boreal"):
        raise param_error("plain_season_south", "locate", "'ambiguous', 'austral' or 'boreal'", plain_season_south)
    require_columns(table, cols.values())
    clash = [c for c in OUTPUT_COLUMNS if c in table.columns]
    if clash:
        raise InputError(
            f"The table already has the column(s) {', '.join(repr(c) for c in clash)} that locate "
            "adds; was it located before? Rename or drop them and run again."
        )


def locate(
    table: pd.DataFrame,
    *,
    lat: str | None = None,
    lon: str | None = None,
    coords: str | None = None,
    site: str | None = None,
    gazetteer: Gazetteer | str | os.PathLike[str] | pd.DataFrame | None = None,
    period: str | None = None,
    start: str | None = None,
    end: str | None = None,
    order: Order | None = None,
    plain_season_south: PlainSeasonSouth = "ambiguous",
    season_months: Mapping[str, Sequence[int]] | None = None,
    fuzzy_threshold: float = 85.0,
    fuzzy_margin: float = 5.0,
    progress: bool | None = None,
) -> pd.DataFrame:
    """Locate every row of a table: validated site coordinates and sampling period.

    Parameters
    ----------
    table : pandas.DataFrame
        The compiled studies, one row per effect; cells are read as text.
    lat, lon : str, optional
        Columns with latitude and longitude in separate cells (any form
        :func:`envlink.locate.coords.parse_lat_lon` reads).
    coords : str, optional
        Column with both coordinates in one cell; used in rows where ``lat``/``lon``
        are blank.
    site : str, optional
        Column of site names, looked up in ``gazetteer`` in rows where the
        coordinate columns are blank.
    gazetteer : Gazetteer, path or DataFrame, optional
        Needed with ``site``; see :func:`envlink.read_gazetteer`.
    period : str, optional
        Column with the sampling period in one cell.
    start, end : str, optional
        Columns with the period's start and end, instead of ``period``.
    order : {"dayfirst", "monthfirst"}, optional
        How to read ``05/06/2011``; by default such dates are flagged
        ``ambiguous_day_month`` and left unread.
    plain_season_south : {"ambiguous", "austral", "boreal"}, default "ambiguous"
        How a plain season (``summer 2010``) at a southern site is read.
    season_months : mapping, optional
        Month numbers of named seasons, e.g. ``{"wet": [11, 12, 1, 2, 3, 4]}``.
    fuzzy_threshold, fuzzy_margin : float, default 85 and 5
        Gazetteer fuzzy matching: the lowest score accepted, and the score gap
        under which two places are ambiguous.
    progress : bool, optional
        Show a progress bar on stderr; by default when the table has more than
        5000 rows and stderr is a terminal.

    Returns
    -------
    pandas.DataFrame
        A new table: the input rows in order with their columns unchanged, then
        ``site_lat``, ``site_lon`` (WGS84 degrees, lon in [-180, 180), float64),
        ``site_precision_km``, ``site_wkt`` (polygon WKT for region sites),
        ``period_start``, ``period_end`` (ISO 8601 dates, inclusive),
        ``period_precision``, ``locate_status`` (``ok``, ``flagged``,
        ``rejected``), ``locate_flags`` (QA codes joined by ``;``) and
        ``locate_notes`` (one sentence per flag naming the column, value and reason,
        joined by ``; ``). Unknown values are missing (NaN / NA).

    Raises
    ------
    InputError
        A named column is missing (with a did-you-mean), the table already has an
        output column, or an option is invalid. Bad cell values never raise.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"lat": ["-8.5", ""], "lon": ["160.25", ""], "when": ["2011", "n.d."]})
    >>> out = locate(t, lat="lat", lon="lon", period="when")
    >>> out["locate_status"].tolist()
    ['ok', 'rejected']
    >>> float(out.loc[0, "site_lat"]), str(out.loc[0, "period_start"]), str(out.loc[0, "period_end"])
    (-8.5, '2011-01-01', '2011-12-31')
    >>> out.loc[1, "locate_flags"]
    'site_missing;period_missing'
    """
    cols: dict[str, str | None] = {
        "lat": lat, "lon": lon, "coords": coords, "site": site,
        "period": period, "start": start, "end": end,
    }
    _check_options(table, cols, gazetteer, order, plain_season_south)
    if site and not isinstance(gazetteer, Gazetteer):
        gazetteer = read_gazetteer(gazetteer)  # type: ignore[arg-type]
    options: dict[str, Any] = {"order": order, "plain_season_south": plain_season_south,
                               "season_months": season_months}
    resolver = _Resolver(cols, gazetteer if site else None, options,  # type: ignore[arg-type]
                         float(fuzzy_threshold), float(fuzzy_margin))

    n = len(table)
    blank = [""] * n

    def texts(name: str | None, read: Callable[[Any], str] = _plain) -> list[str]:
        return [read(v) for v in table[name].tolist()] if name else blank

    lat_t, lon_t, coords_t, site_t = texts(lat), texts(lon), texts(coords), texts(site, _text)
    per_t, start_t, end_t = texts(period), texts(start), texts(end)

    out_lat = np.full(n, np.nan, dtype=np.float64)
    out_lon = np.full(n, np.nan, dtype=np.float64)
    out_prec = np.full(n, np.nan, dtype=np.float64)
    wkt: list[str | None] = [None] * n
    p_start: list[str | None] = [None] * n
    p_end: list[str | None] = [None] * n
    p_prec: list[str | None] = [None] * n
    status: list[str] = ["ok"] * n
    flags_out: list[str] = [""] * n
    notes_out: list[str] = [""] * n

    show = progress if progress is not None else (n > 5000 and sys.stderr.isatty())
    from tqdm.auto import tqdm

    with tqdm(total=n, desc="locate", unit="row", file=sys.stderr, disable=not show) as bar:
        for i in range(n):
            s = resolver.site(lat_t[i], lon_t[i], coords_t[i], site_t[i])
            hemisphere: Hemisphere | None = None
            flags: tuple[str, ...] = ()
            notes: tuple[str, ...] = ()
            rejected = False
            if s is not None:
                out_lat[i], out_lon[i], out_prec[i], wkt[i] = s.lat, s.lon, s.precision_km, s.wkt
                flags, notes, rejected = s.flags, s.notes, s.rejected
                if s.lat > 0:
                    hemisphere = "north"
                elif s.lat < 0:
                    hemisphere = "south"
            w = resolver.when(per_t[i], start_t[i], end_t[i], hemisphere)
            if w is not None:
                p_start[i], p_end[i], p_prec[i] = w.start, w.end, w.precision
                flags, notes, rejected = flags + w.flags, notes + w.notes, rejected or w.rejected
            if flags:
                flags_out[i] = ";".join(dict.fromkeys(flags))
                notes_out[i] = "; ".join(t.rstrip(".") for t in notes) + "." if notes else ""
                status[i] = "rejected" if rejected else "flagged"
            if (i + 1) % 1024 == 0 or i + 1 == n:
                bar.update(i % 1024 + 1)

    out = table.copy(deep=True)
    index = out.index
    out["site_lat"] = pd.Series(out_lat, index=index, dtype="float64")
    out["site_lon"] = pd.Series(out_lon, index=index, dtype="float64")
    out["site_precision_km"] = pd.Series(out_prec, index=index, dtype="float64")
    for name, values in (("site_wkt", wkt), ("period_start", p_start), ("period_end", p_end),
                         ("period_precision", p_prec)):
        out[name] = pd.Series(pd.array(values, dtype="string"), index=index)
    out["locate_status"] = pd.Series(pd.array(status, dtype="string"), index=index)
    out["locate_flags"] = pd.Series(pd.array(flags_out, dtype="string"), index=index)
    out["locate_notes"] = pd.Series(pd.array(notes_out, dtype="string"), index=index)
    return out
