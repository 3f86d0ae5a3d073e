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
from collections.abc import Callable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd

from envlink.errors import InputError, param_error
from envlink.locate._sites_rows import FLAG_MEANINGS, Hemisphere, _plain, _Resolver, _text
from envlink.locate.gazetteer import Gazetteer, read_gazetteer
from envlink.tables import require_columns

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

Order = Literal["dayfirst", "monthfirst"]
PlainSeasonSouth = Literal["ambiguous", "austral", "boreal"]


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
