"""Per-row time windows: the period, lags, fixed spans, and climatology baselines.

Windows are whole days, inclusive of both reported dates, and are returned as
half-open day-number intervals ``[start, end)`` in the grid's calendar (see
:mod:`envlink.extract.calendars`), computed for all rows at once.

- ``period``: ``[period_start, period_end]``.
- ``lag:N{D|M|Y}``: the period shifted N days / months / years earlier.
- ``before-start:N``: the N units ending the day before ``period_start``.
- ``after-end:N``: the N units starting the day after ``period_end``.
- ``around-mid:N``: N units centred on the period's middle day.

Month shifts keep the day of the month, clipped to the target month's length; a date
on the last day of its month stays on the last day (so a whole-month period lagged by
1M is the whole previous month). Dates a calendar lacks (e.g. 31 January in
``360_day``) are clipped to the month's last day and flagged
``date_clipped_to_calendar``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from envlink.extract.calendars import daynum_to_ymd, month_lengths, ymd_to_daynum
from envlink.extract.options import WindowSpec

__all__ = ["RowWindows", "parse_iso_dates", "row_windows", "baseline_window"]


@dataclass
class RowWindows:
    """Windows of every row: ``[start, end)`` day numbers, validity and clipping masks."""

    start: np.ndarray
    end: np.ndarray
    ok: np.ndarray
    clipped: np.ndarray


def parse_iso_dates(values: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Split ISO ``YYYY-MM-DD`` text (or dates) into year, month, day and an ok mask.

    Examples
    --------
    >>> y, m, d, ok = parse_iso_dates(pd.Series(["2004-02-15", "", None]))
    >>> y[0], m[0], d[0], ok.tolist()
    (np.int64(2004), np.int64(2), np.int64(15), [True, False, False])
    """
    text = pd.Series(values).astype("string").str.strip().str.slice(0, 10)
    good = text.str.fullmatch(r"-?\d{4}-\d{2}-\d{2}").fillna(False).to_numpy(dtype=bool)
    dt = pd.to_datetime(text.where(good), format="%Y-%m-%d", errors="coerce")
    ok = good & dt.notna().to_numpy()
    y = np.where(ok, dt.dt.year.fillna(2000).to_numpy(dtype=np.int64), 2000)
    m = np.where(ok, dt.dt.month.fillna(1).to_numpy(dtype=np.int64), 1)
    d = np.where(ok, dt.dt.day.fillna(1).to_numpy(dtype=np.int64), 1)
    return y, m, d, ok


def _add_months(
    y: np.ndarray, m: np.ndarray, d: np.ndarray, k: np.ndarray | int, calendar: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    last = d >= month_lengths(y, m, calendar)
    total = y * 12 + (m - 1) + k
    y2, m2 = total // 12, total % 12 + 1
    ml = month_lengths(y2, m2, calendar)
    return y2, m2, np.where(last, ml, np.minimum(d, ml))


def _shift(day: np.ndarray, n: int, unit: str, calendar: str) -> np.ndarray:
    """Shift whole day numbers by n days / months / years (n may be negative)."""
    if unit == "D":
        return day + n
    y, m, d = daynum_to_ymd(day, calendar)
    y2, m2, d2 = _add_months(y, m, d, n * (12 if unit == "Y" else 1), calendar)
    return ymd_to_daynum(y2, m2, d2, calendar)[0]


def row_windows(
    period_start: pd.Series, period_end: pd.Series, spec: WindowSpec, calendar: str
) -> RowWindows:
    """Windows of every row from its inclusive ISO period dates.

    Rows with a missing or unreadable date get ``ok == False``.

    Examples
    --------
    >>> from envlink.extract.options import parse_window
    >>> w = row_windows(pd.Series(["2004-03-01"]), pd.Series(["2004-03-31"]),
    ...                 parse_window("lag:1M"), "standard")
    >>> [str(np.datetime64(int(x), "D")) for x in (w.start[0], w.end[0])]
    ['2004-02-01', '2004-03-01']
    """
    ys, ms, ds, oks = parse_iso_dates(period_start)
    ye, me, de, oke = parse_iso_dates(period_end)
    s, cs = ymd_to_daynum(ys, ms, ds, calendar)
    e, ce = ymd_to_daynum(ye, me, de, calendar)
    ok = oks & oke & (e >= s)
    if spec.kind == "period":
        ws, we = s, e + 1
    elif spec.kind == "lag":
        if spec.unit == "D":
            ws, we = s - spec.n, e - spec.n + 1
        else:
            k = -spec.n * (12 if spec.unit == "Y" else 1)
            ys2, ms2, ds2 = _add_months(ys, ms, ds, k, calendar)
            ws = ymd_to_daynum(ys2, ms2, ds2, calendar)[0]
            ye2, me2, de2 = _add_months(ye, me, np.minimum(de, month_lengths(ye, me, calendar)), k, calendar)
            we = ymd_to_daynum(ye2, me2, de2, calendar)[0] + 1
    elif spec.kind == "before-start":
        ws, we = _shift(s, -spec.n, spec.unit, calendar), s
    elif spec.kind == "after-end":
        ws, we = e + 1, _shift(e + 1, spec.n, spec.unit, calendar)
    else:  # around-mid
        mid = np.floor((s + e) / 2.0)
        if spec.unit == "D":
            ws = mid - spec.n // 2
            we = ws + spec.n
        else:
            months = spec.n * (12 if spec.unit == "Y" else 1)
            ws = _shift(mid, -(months // 2), "M", calendar) - (15 if months % 2 else 0)
            we = _shift(ws, months, "M", calendar)
    return RowWindows(np.asarray(ws, dtype=np.float64), np.asarray(we, dtype=np.float64), ok, (cs | ce) & ok)


def baseline_window(years: tuple[int, int], calendar: str) -> tuple[float, float]:
    """``[1 January of the first year, 1 January after the last year)`` as day numbers.

    Examples
    --------
    >>> baseline_window((1970, 1970), "360_day")
    (0.0, 360.0)
    """
    d, _ = ymd_to_daynum(np.array([years[0], years[1] + 1]), np.array([1, 1]), np.array([1, 1]), calendar)
    return float(d[0]), float(d[1])
