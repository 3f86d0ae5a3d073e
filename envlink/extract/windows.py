"""Per-row time windows (``window=`` / ``--window``): one object per window, one registry.

:data:`WINDOWS` maps each name to a :class:`Window`, which turns every row's period
into its window; the Python API, the command line, the project file and the docs
read it. Windows are whole days, inclusive of both reported dates, and are returned as
half-open day-number intervals ``[start, end)`` in the grid's calendar (see
:mod:`envlink.extract.calendars`), computed for all rows at once.

- ``period``: ``[period_start, period_end]``.
- ``lag:N{D|M|Y}``: the period shifted N days / months / years earlier.
- ``before-start:N``: the N units ending the day before ``period_start``.
- ``after-end:N``: the N units starting the day after ``period_end``.
- ``around-mid:N``: N units centred on the period's middle day.

Month shifts keep the day of the month, clipped to the target month's length; a date
on the last day of its month stays on the last day (so a whole-month period lagged by
1M is the whole previous month). A period date the calendar lacks (e.g. 31 January in
``360_day``, 29 February in ``noleap``) moves inside the period: a start to the next
day the calendar has, an end to the day before (flagged ``date_clipped_to_calendar``).
A window left without a day that way (a one-day period on 31 January in ``360_day``)
is empty: such rows are marked ``not_in_calendar``.

:data:`TIME_WEIGHTS` names how the steps of a window count (``duration`` or ``equal``).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from envlink.core.registry import Arg, Choice, Entry, Registry
from envlink.extract.calendars import daynum_to_ymd, month_lengths, ymd_to_daynum

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["Window", "WINDOWS", "TIME_WEIGHTS", "PeriodDates", "RowWindows", "parse_iso_dates", "period_dates",
           "window_bounds", "without_empty", "row_windows", "baseline_window"]


@dataclass
class RowWindows:
    """Windows of every row: ``[start, end)`` day numbers, validity and clipping masks.

    ``not_in_calendar`` marks rows whose window holds no day of the calendar, because
    their period holds only days it lacks (their ``ok`` is False).
    """

    start: np.ndarray
    end: np.ndarray
    ok: np.ndarray
    clipped: np.ndarray
    not_in_calendar: np.ndarray | None = None


def parse_iso_dates(values: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Split ISO ``YYYY-MM-DD`` text (or dates) into year, month, day and an ok mask.

    Examples
    --------
    >>> import pandas as pd
    >>> y, m, d, ok = parse_iso_dates(pd.Series(["2004-02-15", "", None]))
    >>> y[0], m[0], d[0], ok.tolist()
    (np.int64(2004), np.int64(2), np.int64(15), [True, False, False])
    """
    import pandas as pd

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


@dataclass(frozen=True)
class PeriodDates:
    """Each row's inclusive period: day numbers ``s``, ``e`` and their (year, month, day)."""

    s: np.ndarray
    e: np.ndarray
    ys: np.ndarray
    ms: np.ndarray
    ds: np.ndarray
    ye: np.ndarray
    me: np.ndarray
    de: np.ndarray


@dataclass(frozen=True)
class Window(ABC):
    """A window rule: how each row's window follows from its period.

    Subclasses implement :meth:`bounds`; ``arg`` is the argument after the colon
    (a duration ``N{D|M|Y}``), None for ``period``.
    """

    name: str
    summary: str
    arg: Arg | None = field(default_factory=Arg.duration)

    def entry(self) -> Entry[Window]:
        """The registry entry of this window."""
        return Entry(self.name, self.summary, obj=self, arg=self.arg)

    @abstractmethod
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        """Half-open day numbers ``[start, end)`` of every row's window."""


class _Period(Window):
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        return p.s, p.e + 1


class _Lag(Window):
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        n, unit = _duration(value)
        if unit == "D":
            return p.s - n, p.e - n + 1
        k = -n * (12 if unit == "Y" else 1)
        ys2, ms2, ds2 = _add_months(p.ys, p.ms, p.ds, k, calendar)
        ws = ymd_to_daynum(ys2, ms2, ds2, calendar)[0]
        ye2, me2, de2 = _add_months(p.ye, p.me, np.minimum(p.de, month_lengths(p.ye, p.me, calendar)), k, calendar)
        return ws, ymd_to_daynum(ye2, me2, de2, calendar)[0] + 1


class _BeforeStart(Window):
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        n, unit = _duration(value)
        return _shift(p.s, -n, unit, calendar), p.s


class _AfterEnd(Window):
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        n, unit = _duration(value)
        return p.e + 1, _shift(p.e + 1, n, unit, calendar)


class _AroundMid(Window):
    def bounds(self, p: PeriodDates, value: tuple[int, str] | None, calendar: str) -> tuple[np.ndarray, np.ndarray]:
        n, unit = _duration(value)
        mid = np.floor((p.s + p.e) / 2.0)
        if unit == "D":
            ws = mid - n // 2
            return ws, ws + n
        months = n * (12 if unit == "Y" else 1)
        ws = _shift(mid, -(months // 2), "M", calendar) - (15 if months % 2 else 0)
        return ws, _shift(ws, months, "M", calendar)


def _duration(value: tuple[int, str] | None) -> tuple[int, str]:
    if value is None:
        raise ValueError("this window needs a duration N{D|M|Y}")
    return value


#: The windows, in the order the docs list them.
WINDOWS: Registry[Window] = Registry("window", param="window", caller="attach")
for _w in (
    _Period("period", "the period itself, `period_start` to `period_end`", arg=None),
    _Lag("lag", "the period shifted N days, months or years earlier"),
    _BeforeStart("before-start", "the N days, months or years ending the day before `period_start`"),
    _AfterEnd("after-end", "the N days, months or years starting the day after `period_end`"),
    _AroundMid("around-mid", "N days, months or years centred on the period's middle day"),
):
    WINDOWS.add(_w.entry())


#: How the time steps of a window count (``time_weights=`` / ``--time-weights``).
TIME_WEIGHTS: Registry[None] = Registry("time weighting", param="time_weights", caller="attach")
TIME_WEIGHTS.add(Entry("duration", "a step counts by the days of its cell inside the window (the default)"))
TIME_WEIGHTS.add(Entry("equal", "every step whose cell overlaps the window counts once"))


def period_dates(period_start: pd.Series, period_end: pd.Series,
                 calendar: str) -> tuple[PeriodDates, np.ndarray, np.ndarray]:
    """Each row's inclusive period in ``calendar``, whether both dates read (and the end is not
    before the start), and whether a date was clipped to the calendar.

    Examples
    --------
    >>> import pandas as pd
    >>> p, ok, clipped = period_dates(pd.Series(["2004-03-01", ""]), pd.Series(["2004-03-31", ""]), "standard")
    >>> ok.tolist(), clipped.tolist()
    ([True, False], [False, False])
    """
    ys, ms, ds, oks = parse_iso_dates(period_start)
    ye, me, de, oke = parse_iso_dates(period_end)
    ok = oks & oke & (ys * 10_000 + ms * 100 + ds <= ye * 10_000 + me * 100 + de)
    # a start the calendar lacks moves forward to the next day it has, an end moves back
    s, cs = ymd_to_daynum(ys, ms, ds, calendar, missing="forward")
    e, ce = ymd_to_daynum(ye, me, de, calendar, missing="back")
    ys, ms, ds = np.where(cs, ys + (ms == 12), ys), np.where(cs, ms % 12 + 1, ms), np.where(cs, 1, ds)
    de = np.where(ce, month_lengths(ye, me, calendar), de)
    return PeriodDates(s, e, ys, ms, ds, ye, me, de), ok, (cs | ce) & ok


def window_bounds(rule: Window, dates: PeriodDates, value: tuple[int, str] | None,
                  calendar: str) -> tuple[np.ndarray, np.ndarray]:
    """Half-open day numbers ``[start, end)`` (float64) of every row's window under ``rule``."""
    ws, we = rule.bounds(dates, value, calendar)
    return np.asarray(ws, dtype=np.float64), np.asarray(we, dtype=np.float64)


def without_empty(ok: np.ndarray, clipped: np.ndarray, ws: np.ndarray,
                  we: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``ok`` and ``clipped`` less the rows whose window holds no day, and those rows.

    A period of only days the calendar lacks (31 January in ``360_day``) has no window
    at all once its start moved forward and its end back.

    Examples
    --------
    >>> ok, clipped, empty = without_empty(np.array([True, True]), np.array([True, False]),
    ...                                    np.array([30.0, 0.0]), np.array([30.0, 5.0]))
    >>> ok.tolist(), clipped.tolist(), empty.tolist()
    ([False, True], [False, False], [True, False])
    """
    empty = ok & (we <= ws)
    ok = ok & ~empty
    return ok, clipped & ok, empty


def row_windows(
    period_start: pd.Series, period_end: pd.Series, window: str | Choice[Window], calendar: str
) -> RowWindows:
    """Windows of every row from its inclusive ISO period dates.

    Rows with a missing or unreadable date get ``ok == False``.

    Examples
    --------
    >>> import pandas as pd
    >>> w = row_windows(pd.Series(["2004-03-01"]), pd.Series(["2004-03-31"]), "lag:1M", "standard")
    >>> [str(np.datetime64(int(x), "D")) for x in (w.start[0], w.end[0])]
    ['2004-02-01', '2004-03-01']
    """
    choice = WINDOWS.parse(window)
    dates, ok, clipped = period_dates(period_start, period_end, calendar)
    rule: Window = choice.entry.obj  # type: ignore[assignment]
    ws, we = window_bounds(rule, dates, choice.value, calendar)
    ok, clipped, empty = without_empty(ok, clipped, ws, we)
    return RowWindows(ws, we, ok, clipped, empty)


def baseline_window(years: tuple[int, int], calendar: str) -> tuple[float, float]:
    """``[1 January of the first year, 1 January after the last year)`` as day numbers.

    Examples
    --------
    >>> baseline_window((1970, 1970), "360_day")
    (0.0, 360.0)
    """
    d, _ = ymd_to_daynum(np.array([years[0], years[1] + 1]), np.array([1, 1]), np.array([1, 1]), calendar)
    return float(d[0]), float(d[1])
