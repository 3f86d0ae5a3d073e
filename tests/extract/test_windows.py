"""Per-row windows and calendars (noleap, 360_day) against pandas date offsets and cftime."""

from __future__ import annotations

import cftime
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from envlink.extract.attach import attach
from envlink.testing import make_grid

from ._grids import table


def _day_grid(calendar: str, start: str = "2000-01-01", days: int = 2000):
    """Daily 1-cell grid whose value is the day's cftime day number (days since 2000-01-01)."""
    return make_grid(np.arange(days, dtype=float)[:, None, None], lat=[0.5], lon=[0.5],
                     start=start, freq="D", calendar=calendar)


def _first_last(g, start, end, window):
    t = table([0.5], [0.5], start, end)
    lo = attach(t, g, name="v", stat="min", window=window)
    hi = attach(t, g, name="v", stat="max", window=window)
    return int(lo["v"][0]), int(hi["v"][0]), lo["v_flags"][0]


def _num(date: pd.Timestamp) -> int:
    return int((date - pd.Timestamp("2000-01-01")).days)


@pytest.mark.parametrize(
    "window, first, last",
    [
        # expected windows by pandas date arithmetic (DateOffset, Timedelta)
        ("period", pd.Timestamp("2002-03-01"), pd.Timestamp("2002-03-31")),
        ("lag:1M", pd.Timestamp("2002-02-01"), pd.Timestamp("2002-02-28")),
        ("lag:10D", pd.Timestamp("2002-02-19"), pd.Timestamp("2002-03-21")),
        ("lag:1Y", pd.Timestamp("2001-03-01"), pd.Timestamp("2001-03-31")),
        ("before-start:90D", pd.Timestamp("2002-03-01") - pd.Timedelta(days=90), pd.Timestamp("2002-02-28")),
        ("before-start:3M", pd.Timestamp("2001-12-01"), pd.Timestamp("2002-02-28")),
        ("after-end:1Y", pd.Timestamp("2002-04-01"), pd.Timestamp("2003-03-31")),
        ("after-end:14D", pd.Timestamp("2002-04-01"), pd.Timestamp("2002-04-14")),
        # middle day of March 1-31 is the 16th; 6 months centred: 3 months each side
        ("around-mid:6M", pd.Timestamp("2001-12-16"), pd.Timestamp("2002-06-15")),
        ("around-mid:10D", pd.Timestamp("2002-03-11"), pd.Timestamp("2002-03-20")),
    ],
)
def test_windows_standard_calendar(window, first, last):
    g = _day_grid("standard")
    a, b, flags = _first_last(g, "2002-03-01", "2002-03-31", window)
    assert (a, b) == (_num(first), _num(last))
    assert flags == ""


def test_noleap_window_counts_calendar_days():
    g = _day_grid("noleap")
    # reference day numbers from cftime in the noleap calendar
    ref = lambda y, m, d: int(cftime.date2num(cftime.datetime(y, m, d, calendar="noleap"), "days since 2000-01-01"))  # noqa: E731
    a, b, flags = _first_last(g, "2004-02-01", "2004-03-01", "period")
    assert (a, b) == (ref(2004, 2, 1), ref(2004, 3, 1))
    assert b - a + 1 == 29  # 28 February days + 1 March: no 29 Feb in noleap
    # 29 February does not exist in noleap: clipped to the 28th and flagged
    a, b, flags = _first_last(g, "2004-02-10", "2004-02-29", "period")
    assert b == ref(2004, 2, 28) and flags == "date_clipped_to_calendar"


def test_360_day_window_ending_on_the_31st():
    g = _day_grid("360_day")
    ref = lambda y, m, d: int(cftime.date2num(cftime.datetime(y, m, d, calendar="360_day"), "days since 2000-01-01"))  # noqa: E731
    # January 31 does not exist in a 360-day calendar: the window ends on the 30th
    a, b, flags = _first_last(g, "2001-01-01", "2001-01-31", "period")
    assert (a, b) == (ref(2001, 1, 1), ref(2001, 1, 30))
    assert flags == "date_clipped_to_calendar"
    out = attach(table([0.5], [0.5], "2001-01-01", "2001-01-31"), g, name="v")
    assert_allclose(out["v_coverage"], [1.0], rtol=0, atol=1e-12)
    # whole-month lag in 360_day: March 1-30 lagged 1 month is February 1-30
    a, b, _ = _first_last(g, "2001-03-01", "2001-03-30", "lag:1M")
    assert (a, b) == (ref(2001, 2, 1), ref(2001, 2, 30))


def test_monthly_360_day_grid_mean():
    # monthly 360_day steps are all 30 days: duration and equal weights agree
    v = np.arange(24.0)[:, None, None]
    g = make_grid(v, lat=[0.5], lon=[0.5], start="2001-01-01", calendar="360_day")
    t = table([0.5], [0.5], "2001-02-01", "2001-04-30")
    out = attach(t, g, name="v")
    assert_allclose(out["v"], [2.0], rtol=1e-12)
    assert out["v_flags"][0] == ""


def test_unreadable_or_missing_periods_and_rejected_sites():
    g = _day_grid("standard", days=40)
    t = table([0.5, 0.5, 0.5, 0.5], [0.5, 0.5, 0.5, 0.5],
              ["2000-01-05", "", "2000-13-01", "2000-01-10"], ["2000-01-09", "", "2000-01-02", "2000-01-05"])
    t.loc[0, "locate_status"] = "rejected"
    out = attach(t, g, name="v")
    assert out["v_flags"].tolist() == ["site_rejected", "no_period", "no_period", "no_period"]
    assert out["v"].isna().all()
