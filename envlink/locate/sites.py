"""The locate stage: a table of reported places and dates to validated sites and periods.

:func:`locate` reads, row by row, separate latitude/longitude cells, a single
coordinates cell, or a site name looked up in a gazetteer (in that order, the first
non-blank source wins), and a period (one cell, or start and end cells). It returns
a new table with every input row and column unchanged plus the columns of
:data:`envlink.core.columns.LOCATE_COLUMNS`; a value that cannot be read rejects the row with a QA flag and
a note, it never raises.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd

from envlink.core.columns import LOCATE_COLUMNS
from envlink.core.flags import join_flags
from envlink.core.progress import progress_bar
from envlink.core.util import INVISIBLE_CHARS
from envlink.errors import InputError, param_error
from envlink.locate._sites_rows import FLAG_MEANINGS, Hemisphere, _plain, _Resolver, _text
from envlink.locate.gazetteer import Gazetteer, read_gazetteer
from envlink.tables import require_columns

__all__ = ["locate", "LOCATE_COLUMNS", "OUTPUT_COLUMNS", "FLAG_MEANINGS", "Status"]

Status = Literal["ok", "flagged", "rejected"]

#: Columns :func:`locate` adds, in this order (the old name of LOCATE_COLUMNS).
OUTPUT_COLUMNS = LOCATE_COLUMNS

Order = Literal["dayfirst", "monthfirst"]
PlainSeasonSouth = Literal["ambiguous", "austral", "boreal"]

#: the characters ``_plain`` removes, as a regular-expression class
_INVISIBLE_CLASS = "[" + "".join(map(chr, INVISIBLE_CHARS)) + "]"


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
    clash = [c for c in LOCATE_COLUMNS if c in table.columns]
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
    # a bar for small tables only flickers: by default, none under 5000 rows
    show = progress if progress is not None or len(table) > 5000 else False
    located = _resolve_rows(resolver, _row_texts(table, cols), len(table), show)
    return _with_columns(table, located)


def _row_texts(table: pd.DataFrame, cols: Mapping[str, str | None]) -> dict[str, list[str]]:
    """Step 1: the text of every row's cells, per field (blank where no column is named)."""
    blank = [""] * len(table)
    return {field: _column_texts(table[name], plain=field != "site") if name else blank
            for field, name in cols.items()}


def _column_texts(column: pd.Series, plain: bool) -> list[str]:
    """One column's cells as text (see ``_plain`` and ``_text``); a column of text at once."""
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
    except ImportError:  # pyarrow is an optional extra
        pa = None
    if pa is None or not (isinstance(column.dtype, pd.StringDtype)
                          or (column.dtype == object and pd.api.types.infer_dtype(column, skipna=True) == "string")):
        read: Callable[[Any], str] = _plain if plain else _text  # numbers, dates, mixed cells
        return [read(v) for v in column.tolist()]
    arr = pc.fill_null(pa.array(column, type=pa.string(), from_pandas=True), "")
    if plain:
        arr = pc.replace_substring_regex(arr, _INVISIBLE_CLASS, "")
    return arr.to_pylist()  # type: ignore[no-any-return]


class _Located:
    """The located values of ``n`` rows, filled row by row."""

    def __init__(self, n: int) -> None:
        self.lat = np.full(n, np.nan, dtype=np.float64)
        self.lon = np.full(n, np.nan, dtype=np.float64)
        self.precision_km = np.full(n, np.nan, dtype=np.float64)
        self.text: dict[str, list[str | None]] = {
            c: [None] * n for c in ("site_wkt", "period_start", "period_end", "period_precision")
        }
        self.status: list[str] = ["ok"] * n
        self.flags: list[str] = [""] * n
        self.notes: list[str] = [""] * n


def _none_done(cols: Mapping[str, str | None], n: int) -> tuple[np.ndarray, np.ndarray]:
    """No row's site or period done yet (True only for a part the table has no column for)."""
    site = any(cols[k] for k in ("lat", "coords", "site"))
    when = any(cols[k] for k in ("period", "start"))
    return np.full(n, not site), np.full(n, not when)


def _fast_parts(cols: Mapping[str, str | None], t: Mapping[str, list[str]], out: _Located,
                n: int) -> tuple[np.ndarray, np.ndarray]:
    """Step 2a: the sites and periods written in the common forms, read a column at once.

    Fills ``out`` for those rows and returns which rows' site and period are done (True
    also where the table has no column for that part); the rest go through the per-cell
    parsers of step 2b, with their flags and notes.
    """
    try:
        from envlink.locate._fastrows import fast_lat_lon, fast_period, fast_periods
    except ImportError:  # without pyarrow (an optional extra) every cell is read by its parser
        return _none_done(cols, n)
    site_done = np.ones(n, dtype=bool)
    if cols["lat"]:
        site_done, lat, lon, km = fast_lat_lon(t["lat"], t["lon"])
        out.lat[site_done], out.lon[site_done], out.precision_km[site_done] = (
            lat[site_done], lon[site_done], km[site_done])
    elif cols["coords"] or cols["site"]:
        site_done = np.zeros(n, dtype=bool)
    when_done = np.ones(n, dtype=bool)
    if cols["period"] or cols["start"]:
        when_done, first, last, unit = (fast_period(t["period"]) if cols["period"]
                                        else fast_periods(t["start"], t["end"]))
        for name, values in (("period_start", first), ("period_end", last), ("period_precision", unit)):
            column = out.text[name]
            for i in np.flatnonzero(when_done).tolist():
                column[i] = values[i]
    return site_done, when_done


def _resolve_rows(resolver: _Resolver, t: Mapping[str, list[str]], n: int, show: bool | None) -> _Located:
    """Step 2: resolve each row's site, then its period (hemisphere from the site)."""
    out = _Located(n)
    site_done, when_done = _fast_parts(resolver.cols, t, out, n) if n else (np.ones(0, bool), np.ones(0, bool))
    slow = np.flatnonzero(~(site_done & when_done)).tolist()
    with progress_bar(n, "locate", "row", show=show, leave=True) as bar:
        bar.update(n - len(slow))
        for k, i in enumerate(slow):
            s = None if site_done[i] else resolver.site(t["lat"][i], t["lon"][i], t["coords"][i], t["site"][i])
            hemisphere: Hemisphere | None = None
            flags: tuple[str, ...] = ()
            notes: tuple[str, ...] = ()
            rejected = False
            if s is not None:
                out.lat[i], out.lon[i], out.precision_km[i] = s.lat, s.lon, s.precision_km
                out.text["site_wkt"][i] = s.wkt
                flags, notes, rejected = s.flags, s.notes, s.rejected
            if out.lat[i] > 0:
                hemisphere = "north"
            elif out.lat[i] < 0:
                hemisphere = "south"
            w = None if when_done[i] else resolver.when(t["period"][i], t["start"][i], t["end"][i], hemisphere)
            if w is not None:
                out.text["period_start"][i], out.text["period_end"][i] = w.start, w.end
                out.text["period_precision"][i] = w.precision
                flags, notes, rejected = flags + w.flags, notes + w.notes, rejected or w.rejected
            if flags:
                out.flags[i] = join_flags(flags)
                out.notes[i] = "; ".join(t.rstrip(".") for t in notes) + "." if notes else ""
                out.status[i] = "rejected" if rejected else "flagged"
            if (k + 1) % 1024 == 0 or k + 1 == len(slow):
                bar.update(k % 1024 + 1)
    return out


def _with_columns(table: pd.DataFrame, located: _Located) -> pd.DataFrame:
    """Step 3: a copy of ``table`` with the columns of LOCATE_COLUMNS added, in order."""
    out = table.copy(deep=True)
    index = out.index

    def text(values: list[str] | list[str | None]) -> pd.Series:
        return pd.Series(pd.array(values, dtype="string"), index=index)

    out["site_lat"] = pd.Series(located.lat, index=index, dtype="float64")
    out["site_lon"] = pd.Series(located.lon, index=index, dtype="float64")
    out["site_precision_km"] = pd.Series(located.precision_km, index=index, dtype="float64")
    for name, values in located.text.items():
        out[name] = text(values)
    out["locate_status"] = text(located.status)
    out["locate_flags"] = text(located.flags)
    out["locate_notes"] = text(located.notes)
    return out
