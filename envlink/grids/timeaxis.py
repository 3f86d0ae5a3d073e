"""CF time coordinates: decode stamps in every CF calendar and find each step's cell.

Decoding follows CF Conventions v1.11 §4.4 (``<unit> since <reference date>``) and
§4.4.1 (calendars), with cftime doing the calendar arithmetic. Cells come from the
``bounds`` variable (§7.1) when there is one; otherwise they are inferred from the
step between stamps (rules in :func:`infer_cells` and docs/grids.md).
"""

from __future__ import annotations

import datetime as _dt
import re

import cftime
import numpy as np

from envlink.core.calendars import CF_CALENDARS, STANDARD_CALENDARS
from envlink.errors import GridError, InputError

__all__ = [
    "CF_CALENDARS",
    "STANDARD_CALENDARS",
    "normalise_calendar",
    "decode_time",
    "infer_cells",
    "cells_from_bounds",
    "to_output_times",
    "step_kind",
]

_UNITS = re.compile(r"^\s*(\w+)\s+since\s+(.+?)\s*$", re.IGNORECASE)
_MONTH_WORDS = ("month", "months", "mon")
_YEAR_WORDS = ("year", "years", "yr", "yrs", "common_year", "common_years")


def normalise_calendar(calendar: str | None, *, variable: str = "time") -> str:
    """Return the lower-case CF calendar name, ``"standard"`` when none is given.

    Examples
    --------
    >>> normalise_calendar("NoLeap"), normalise_calendar(None)
    ('noleap', 'standard')
    """
    if calendar is None or str(calendar).strip() == "":
        return "standard"
    cal = str(calendar).strip().lower()
    if cal not in CF_CALENDARS:
        raise InputError(
            f"The calendar {calendar!r} of {variable} is not a CF calendar; expected one of "
            f"{', '.join(CF_CALENDARS)}. Declare the right one with calendar='noleap' (say)."
        )
    return cal


def _add_months(ref: cftime.datetime, n: int, calendar: str) -> cftime.datetime:
    y, m = divmod(ref.month - 1 + n, 12)
    year, month = ref.year + y, m + 1
    last = cftime.datetime(year, month, 1, calendar=calendar).daysinmonth
    return cftime.datetime(
        year, month, min(ref.day, last), ref.hour, ref.minute, ref.second, calendar=calendar
    )


def decode_time(
    values: np.ndarray, units: str, calendar: str, *, variable: str = "time"
) -> tuple[np.ndarray, list[str]]:
    """Decode numeric CF time values into an object array of ``cftime.datetime``.

    ``months since`` and ``years since`` (which CF discourages, §4.4) are read as whole
    calendar months / years added to the reference date when every value is a whole
    number; fractional values are rejected, because UDUNITS months (30.436875 days)
    rarely mean what the file's author intended. In the ``360_day`` calendar, months
    are exact (30 days) and cftime decodes them directly.

    Parameters
    ----------
    values : ndarray
        Numbers as stored.
    units : str
        ``"<unit> since <date>"``.
    calendar : str
        A CF calendar name (see :data:`CF_CALENDARS`).
    variable : str
        Name used in messages.

    Returns
    -------
    (ndarray of cftime.datetime, list of str)
        Stamps and the notes of conventions applied.

    Examples
    --------
    >>> t, notes = decode_time(np.array([0, 1]), "months since 2001-01-15", "noleap")
    >>> [d.isoformat()[:10] for d in t], notes
    (['2001-01-15', '2001-02-15'], ["time 'months since' read as whole calendar months"])
    """
    match = _UNITS.match(str(units or ""))
    if match is None:
        raise InputError(
            f"The time axis {variable!r} has units {units!r}; expected '<unit> since "
            "<date>' (CF §4.4), e.g. 'days since 1990-01-01'. Name another time axis with "
            "time='NAME', or open a static grid with time=False."
        )
    word, ref_text = match.group(1).lower(), match.group(2)
    vals = np.asarray(values, dtype=np.float64)
    if not np.all(np.isfinite(vals)):
        raise GridError(f"The time axis {variable!r} holds missing or non-finite values.")
    notes: list[str] = []
    if word in _MONTH_WORDS + _YEAR_WORDS and calendar != "360_day":
        whole = np.round(vals)
        if not np.allclose(vals, whole, rtol=0.0, atol=1e-9):
            raise InputError(
                f"The time axis {variable!r} uses {units!r} with fractional values; CF "
                "discourages month and year units (their length varies), and envlink reads "
                "them only as whole calendar months or years. Rewrite the axis in days."
            )
        try:
            ref = cftime.num2date(0.0, f"days since {ref_text}", calendar=calendar,
                                  only_use_cftime_datetimes=True)
        except ValueError as exc:
            raise InputError(f"The time units {units!r} of {variable!r}: {exc}") from None
        per = 12 if word in _YEAR_WORDS else 1
        out = np.array([_add_months(ref, int(k) * per, calendar) for k in whole], dtype=object)
        kind = "years" if per == 12 else "months"
        notes.append(f"time '{kind} since' read as whole calendar {kind}")
        return out, notes
    try:
        out = cftime.num2date(vals, units, calendar=calendar, only_use_cftime_datetimes=True)
    except ValueError as exc:
        raise InputError(f"The time units {units!r} of {variable!r} cannot be decoded: {exc}") from None
    return np.asarray(out, dtype=object).reshape(vals.shape), notes


def _month_start(d: cftime.datetime, shift: int = 0) -> cftime.datetime:
    y, m = divmod(d.month - 1 + shift, 12)
    return cftime.datetime(d.year + y, m + 1, 1, calendar=d.calendar)


def _as_days(stamps: np.ndarray) -> np.ndarray:
    """Stamps as float days since the first stamp's midnight (vectorised by cftime)."""
    arr = np.asarray(stamps, dtype=object)
    first = arr[0]
    units = f"days since {first.year:04d}-{first.month:02d}-{first.day:02d}"
    return np.asarray(cftime.date2num(list(arr), units, calendar=first.calendar), dtype=np.float64)


def step_kind(stamps: np.ndarray, days: np.ndarray | None = None) -> tuple[str, float]:
    """Classify the step between stamps: ``daily``, ``monthly``, ``yearly``, ``regular`` or ``single``.

    Stamps at one time of day and whole days apart, at least one day apart once, are
    daily; stamps on one day of the month (and one time of day) at least 27.5 days
    apart are monthly, on one day of the year at least 359 days apart yearly (gaps
    allowed in all three). Otherwise the median step decides: 0.99-1.01 days daily,
    27.5-31.5 monthly, 359-367 yearly, anything else regular.

    Returns the kind and the median step in days.

    Examples
    --------
    >>> t = np.array([cftime.datetime(2000, m, 15, calendar="noleap") for m in (1, 2, 3)])
    >>> step_kind(t)
    ('monthly', 29.5)
    """
    if len(stamps) < 2:
        return "single", float("nan")
    diffs = np.diff(_as_days(stamps) if days is None else days)
    med = float(np.median(diffs))
    low = float(diffs.min())
    clock = {(d.hour, d.minute, d.second) for d in stamps}
    if len(clock) == 1 and 0.99 <= low <= 1.01 and np.allclose(diffs, np.round(diffs), rtol=0, atol=1e-6):
        return "daily", med  # whole days apart, gaps allowed
    if len(clock) == 1 and len({(d.month, d.day) for d in stamps}) == 1 and low >= 359.0:
        return "yearly", med
    if len(clock) == 1 and len({d.day for d in stamps}) == 1 and low >= 27.5:
        return "monthly", med  # same day of every month, gaps allowed
    if 0.99 <= med <= 1.01:
        return "daily", med
    if 27.5 <= med <= 31.5:
        return "monthly", med
    if 359.0 <= med <= 367.0:
        return "yearly", med
    return "regular", med


def infer_cells(stamps: np.ndarray, *, variable: str = "time") -> tuple[np.ndarray, np.ndarray, str]:
    """Infer half-open cells ``[start, end)`` from stamps that have no bounds.

    Rules (documented in docs/grids.md):

    - daily step (median 1 day): the cell is the calendar day holding the stamp, so
      stamps at 00:00 and at 12:00 give the same cells;
    - monthly step (median 27.5-31.5 days): the calendar month holding the stamp, so
      month-start, mid-month and month-end stamps give the same cells;
    - yearly step (median 359-367 days): the calendar year holding the stamp;
    - any other step: the stamp starts its cell, which lasts the median step;
    - a single stamp: the calendar day holding it.

    Raises GridError when two stamps fall in the same cell.

    Examples
    --------
    >>> t = np.array([cftime.datetime(2000, m, 1, calendar="360_day") for m in (1, 2)])
    >>> s, e, rule = infer_cells(t)
    >>> e[-1].isoformat()[:10], rule
    ('2000-03-01', 'time cells inferred: monthly step, each stamp taken as its calendar month')
    """
    if len(stamps) == 0:
        raise GridError(f"The time axis {variable!r} has no steps (length 0); no cells can be inferred.")
    days = _as_days(stamps)
    kind, med = step_kind(stamps, days)
    if kind in ("daily", "single"):
        first = stamps[0]
        units = f"days since {first.year:04d}-{first.month:02d}-{first.day:02d}"
        # Floor to the calendar day with half a second of tolerance: a stamp decoded as
        # 23:59:59.9999 from floating-point time values means the next midnight.
        day = np.floor(days + 0.5 / 86400.0)
        cal = first.calendar
        starts = np.asarray(cftime.num2date(day, units, calendar=cal, only_use_cftime_datetimes=True), dtype=object)
        ends = np.asarray(cftime.num2date(day + 1.0, units, calendar=cal, only_use_cftime_datetimes=True), dtype=object)
        rule = (
            "time cells inferred: daily step, each stamp taken as its calendar day"
            if kind == "daily"
            else "time cell inferred: single step without bounds taken as its calendar day"
        )
        _check_numbers(day, day + 1.0, starts, ends, variable)
        return starts, ends, rule
    elif kind == "monthly":
        starts = np.array([_month_start(d) for d in stamps], dtype=object)
        ends = np.array([_month_start(d, 1) for d in stamps], dtype=object)
        rule = "time cells inferred: monthly step, each stamp taken as its calendar month"
    elif kind == "yearly":
        starts = np.array([cftime.datetime(d.year, 1, 1, calendar=d.calendar) for d in stamps], dtype=object)
        ends = np.array([cftime.datetime(d.year + 1, 1, 1, calendar=d.calendar) for d in stamps], dtype=object)
        rule = "time cells inferred: yearly step, each stamp taken as its calendar year"
    else:
        step = _dt.timedelta(seconds=round(med * 86400.0))
        starts = np.asarray(stamps, dtype=object)
        ends = np.array([d + step for d in stamps], dtype=object)
        rule = f"time cells inferred: regular step of {med:g} days, each stamp taken as its cell start"
    _check_cells(starts, ends, variable)
    return starts, ends, rule


def _check_cells(starts: np.ndarray, ends: np.ndarray, variable: str) -> None:
    if len(starts) == 0:
        return
    both = _as_days(np.concatenate([np.asarray(starts, dtype=object), np.asarray(ends, dtype=object)]))
    _check_numbers(both[: len(starts)], both[len(starts):], starts, ends, variable)


def _check_numbers(
    s_num: np.ndarray, e_num: np.ndarray, starts: np.ndarray, ends: np.ndarray, variable: str
) -> None:
    bad = np.flatnonzero(~(s_num < e_num))
    if bad.size:
        i = int(bad[0])
        raise GridError(
            f"The time cell {i} of {variable!r} is empty or reversed: "
            f"[{starts[i].isoformat()}, {ends[i].isoformat()})."
        )
    over = np.flatnonzero(s_num[1:] < e_num[:-1])
    if over.size:
        i = int(over[0]) + 1
        raise GridError(
            f"The time steps {i - 1} and {i} of {variable!r} overlap or are not in order "
            f"(cells [{starts[i - 1].isoformat()}, {ends[i - 1].isoformat()}) and "
            f"[{starts[i].isoformat()}, {ends[i].isoformat()})). Two stamps fall in one cell, or "
            "the steps are too irregular to infer cells: give the cells explicitly (a CF bounds "
            "variable, or band_dates=[(start, end), ...] for a GeoTIFF)."
        )


def cells_from_bounds(
    bounds: np.ndarray, units: str, calendar: str, *, variable: str = "time_bnds"
) -> tuple[np.ndarray, np.ndarray]:
    """Decode a CF bounds array of shape ``(n, 2)`` (§7.1) into cell starts and ends.

    Examples
    --------
    >>> s, e = cells_from_bounds(np.array([[0.0, 31.0]]), "days since 2000-01-01", "standard")
    >>> s[0].isoformat(), e[0].isoformat()
    ('2000-01-01T00:00:00', '2000-02-01T00:00:00')
    """
    b = np.asarray(bounds, dtype=np.float64)
    if b.ndim != 2 or b.shape[1] != 2:
        raise GridError(f"The time bounds {variable!r} have shape {b.shape}; expected (n, 2).")
    decoded, _ = decode_time(b.ravel(), units, calendar, variable=variable)
    decoded = decoded.reshape(b.shape)
    starts, ends = decoded[:, 0].copy(), decoded[:, 1].copy()
    _check_cells(starts, ends, variable)
    return starts, ends


def to_output_times(stamps: np.ndarray, calendar: str) -> np.ndarray:
    """Return ``datetime64[ns]`` for standard calendars (when in range), else the cftime objects.

    Examples
    --------
    >>> t = np.array([cftime.datetime(2000, 1, 1, 12, calendar="standard")], dtype=object)
    >>> to_output_times(t, "standard")
    array(['2000-01-01T12:00:00.000000000'], dtype='datetime64[ns]')
    """
    arr = np.asarray(stamps, dtype=object)
    if calendar not in STANDARD_CALENDARS or arr.size == 0:
        return arr
    lo, hi = min(arr), max(arr)
    # datetime64[ns] spans 1677-09-22..2262-04-11; "standard" is Julian before 1582-10-15.
    if lo.year < 1678 or hi.year > 2261:
        return arr
    micro = cftime.date2num(list(arr), "microseconds since 1970-01-01", calendar=calendar)
    return np.round(np.asarray(micro, dtype=np.float64)).astype("int64").astype(
        "datetime64[us]"
    ).astype("datetime64[ns]")
