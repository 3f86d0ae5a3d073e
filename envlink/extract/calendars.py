"""Calendar-aware day numbers for windows and grid time steps (CF calendars).

Every date is turned into a float "day number": days since 1970-01-01 00:00 counted
in the grid's own calendar, so window arithmetic is plain subtraction whatever the
calendar (``standard``, ``noleap``/``365_day``, ``all_leap``/``366_day``,
``360_day``, ``julian``).

A date that the calendar lacks (the 31st of any month in ``360_day``; 29 February
in ``noleap``) moves to the last day of that month in the calendar (``missing="back"``,
for the end of a period) or to the first day of the next month (``missing="forward"``,
for its start), so a period never gains a day the reported dates left out; callers
flag it.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from envlink.core.calendars import canonical_calendar

__all__ = ["month_lengths", "ymd_to_daynum", "daynum_to_ymd", "times_to_daynum"]

_NOLEAP = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])
_ALLLEAP = np.array([31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def month_lengths(year: np.ndarray, month: np.ndarray, calendar: str) -> np.ndarray:
    """Number of days of each (year, month) in the calendar.

    Examples
    --------
    >>> month_lengths(np.array([2000, 2001]), np.array([2, 2]), "standard").tolist()
    [29, 28]
    >>> month_lengths(np.array([2000]), np.array([1]), "360_day").tolist()
    [30]
    """
    cal = canonical_calendar(calendar)
    y = np.asarray(year, dtype=np.int64)
    m = np.asarray(month, dtype=np.int64)
    if cal == "360_day":
        return np.full(np.broadcast(y, m).shape, 30, dtype=np.int64)
    if cal == "noleap":
        return _NOLEAP[m - 1]
    if cal == "all_leap":
        return _ALLLEAP[m - 1]
    if cal == "julian":
        leap = y % 4 == 0
    else:
        leap = ((y % 4 == 0) & (y % 100 != 0)) | (y % 400 == 0)
    return np.where(leap & (m == 2), 29, _NOLEAP[m - 1])


def ymd_to_daynum(
    year: np.ndarray, month: np.ndarray, day: np.ndarray, calendar: str,
    missing: Literal["back", "forward"] = "back",
) -> tuple[np.ndarray, np.ndarray]:
    """Day numbers (days since 1970-01-01 in the calendar) and a "clipped" mask.

    A day the calendar lacks becomes the month's last day (``missing="back"``) or the
    next month's first day (``missing="forward"``); the mask marks it.

    Examples
    --------
    >>> d, clipped = ymd_to_daynum(np.array([1970]), np.array([1]), np.array([31]), "360_day")
    >>> d.tolist(), clipped.tolist()
    ([29.0], [True])
    >>> ymd_to_daynum(np.array([1970]), np.array([1]), np.array([31]), "360_day", "forward")[0].tolist()
    [30.0]
    """
    cal = canonical_calendar(calendar)
    y = np.asarray(year, dtype=np.int64)
    m = np.asarray(month, dtype=np.int64)
    d = np.asarray(day, dtype=np.int64)
    ml = month_lengths(y, m, cal)
    clipped = d > ml
    d = np.minimum(d, ml)
    if cal == "360_day":
        out = 360 * (y - 1970) + 30 * (m - 1) + d - 1
    elif cal in ("noleap", "all_leap"):
        per = 365 if cal == "noleap" else 366
        cum = np.concatenate([[0], np.cumsum(_NOLEAP if cal == "noleap" else _ALLLEAP)])
        out = per * (y - 1970) + cum[m - 1] + d - 1
    elif cal == "julian":
        import cftime

        dates = [cftime.datetime(int(a), int(b), int(c), calendar="julian") for a, b, c in zip(y.ravel(), m.ravel(), d.ravel(), strict=True)]
        out = np.asarray(cftime.date2num(dates, "days since 1970-01-01", calendar="julian"), dtype=np.float64).reshape(y.shape)
    else:
        # proleptic Gregorian through numpy (CF "standard" equals it after 1582-10-15)
        months = (y - 1970) * 12 + (m - 1)
        out = months.astype("datetime64[M]").astype("datetime64[D]").astype(np.int64) + d - 1
    if missing == "forward":
        out = out + clipped  # the day after the month's last day
    return np.asarray(out, dtype=np.float64), np.asarray(clipped)


def daynum_to_ymd(daynum: np.ndarray, calendar: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inverse of :func:`ymd_to_daynum` for whole day numbers.

    Examples
    --------
    >>> [a.tolist() for a in daynum_to_ymd(np.array([59.0]), "noleap")]
    [[1970], [3], [1]]
    """
    cal = canonical_calendar(calendar)
    n = np.floor(np.asarray(daynum, dtype=np.float64)).astype(np.int64)
    if cal == "360_day":
        y, r = np.divmod(n, 360)
        return y + 1970, r // 30 + 1, r % 30 + 1
    if cal in ("noleap", "all_leap"):
        per = 365 if cal == "noleap" else 366
        cum = np.concatenate([[0], np.cumsum(_NOLEAP if cal == "noleap" else _ALLLEAP)])
        y, r = np.divmod(n, per)
        m = np.searchsorted(cum, r, side="right")
        return y + 1970, m, r - cum[m - 1] + 1
    if cal == "julian":
        import cftime

        dates = cftime.num2date(n.ravel(), "days since 1970-01-01", calendar="julian")
        ys = np.array([x.year for x in dates]).reshape(n.shape)
        ms = np.array([x.month for x in dates]).reshape(n.shape)
        ds = np.array([x.day for x in dates]).reshape(n.shape)
        return ys, ms, ds
    dt = n.astype("datetime64[D]")
    mo = dt.astype("datetime64[M]")
    months = mo.astype(np.int64)
    return months // 12 + 1970, months % 12 + 1, (dt - mo.astype("datetime64[D]")).astype(np.int64) + 1


def times_to_daynum(values: np.ndarray, calendar: str) -> np.ndarray:
    """Day numbers (float, fractional days kept) of datetime64 or cftime time stamps.

    Examples
    --------
    >>> times_to_daynum(np.array(["1970-01-02T12:00"], dtype="datetime64[ns]"), "standard").tolist()
    [1.5]
    """
    v = np.asarray(values)
    if np.issubdtype(v.dtype, np.datetime64):
        return (v.astype("datetime64[ns]").astype(np.int64) / 86_400e9).astype(np.float64)
    import cftime

    cal = getattr(v.ravel()[0], "calendar", None) or calendar
    return np.asarray(cftime.date2num(v, "days since 1970-01-01", calendar=cal), dtype=np.float64)
