"""Sites on land cells, dates a calendar lacks, and each QA flag once per row.

Reference for the calendars: the CF Conventions (section 4.4.1, "Calendar"): the
``360_day`` calendar has 30 days in every month and the ``noleap`` calendar has no
29 February. Worked values are counted by hand from those definitions.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from envlink.core.flags import split_flags
from envlink.extract.attach import attach
from envlink.extract.windows import row_windows
from envlink.testing import make_grid

from ._grids import table


def _daily_360(values_per_day: np.ndarray) -> object:
    return make_grid(values_per_day.reshape(-1, 1, 1), lat=[0.5], lon=[0.5], freq="D",
                     start="2001-01-01", calendar="360_day")


# ------------------------------------------------------------------ land cells (item 4)
def test_a_site_on_an_all_missing_cell_is_flagged_as_land_not_as_a_time_gap():
    v = np.full((6, 1, 2), 20.0)
    v[:, 0, 1] = np.nan  # the eastern cell never has data: land
    v[2:, 0, 0] = np.nan  # the western cell has data only in its first two months
    g = make_grid(v, lat=[0.5], lon=[0.5, 1.5])
    t = table([0.5, 0.5], [1.5, 0.5], "2000-05-01", "2000-05-31")
    out = attach(t, g, name="v")
    assert np.isnan(out["v"]).all()
    assert out["v_flags"].tolist() == ["cell_on_land", "no_data_in_window"]


def test_land_cells_of_every_source_cell_count_for_multi_cell_rules():
    v = np.full((2, 2, 2), np.nan)
    g = make_grid(v, lat=[0.0, 1.0], lon=[0.0, 1.0])
    out = attach(table([0.5], [0.5], "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    assert out["v_flags"].tolist() == ["cell_on_land"]


def test_the_attach_summary_suggests_nearest_valid_for_land_cells():
    from envlink.commands.attach import summary

    v = np.full((2, 1, 2), 20.0)
    v[:, 0, 1] = np.nan
    g = make_grid(v, lat=[0.5], lon=[0.5, 1.5])
    out = attach(table([0.5, 0.5], [1.5, 0.5], "2000-01-01", "2000-01-31"), g, name="v")
    text = summary(out, "v", "out.csv")
    assert "cell_on_land" in text
    assert "--spatial nearest-valid:" in text


# ------------------------------------------------------------------ calendars (item 7)
def test_a_start_the_calendar_lacks_moves_forward_and_an_end_moves_back():
    # 360_day: 2001-01-31 does not exist. A period 31 Jan .. 31 Mar starts on 1 Feb (the
    # next day the calendar has) and ends on 30 Mar: 30 + 30 = 60 days (CF 4.4.1).
    w = row_windows(pd_series(["2001-01-31"]), pd_series(["2001-03-31"]), "period", "360_day")
    start_feb1 = 360 * 31 + 30  # day numbers since 1970-01-01 in 360_day
    assert w.start.tolist() == [start_feb1] and w.end.tolist() == [start_feb1 + 60]
    assert w.clipped.tolist() == [True] and w.ok.tolist() == [True]
    # noleap: a start on 29 February moves to 1 March, an end on 29 February to 28 February
    w = row_windows(pd_series(["2004-02-29", "2004-02-01"]), pd_series(["2004-03-02", "2004-02-29"]),
                    "period", "noleap")
    assert (w.end - w.start).tolist() == [2.0, 28.0]


def test_values_of_a_window_starting_on_a_missing_day_leave_the_day_before_out():
    # one value per 360_day day: January 1..30 (value = day of month), February 101..130
    vals = np.concatenate([np.arange(1.0, 31.0), np.arange(101.0, 131.0)])
    g = _daily_360(vals)
    out = attach(table([0.5], [0.5], "2001-01-31", "2001-02-02"), g, name="v")
    # the window is 1-2 February only: mean(101, 102); the old clipping added 30 January
    assert_allclose(out["v"], [101.5], rtol=0, atol=1e-12)
    assert out["v_flags"].tolist() == ["date_clipped_to_calendar"]


def test_a_one_day_window_on_a_missing_day_has_no_steps_and_is_flagged():
    vals = np.concatenate([np.arange(1.0, 31.0), np.arange(101.0, 131.0)])
    g = _daily_360(vals)
    out = attach(table([0.5], [0.5], "2001-01-31", "2001-01-31"), g, name="v")
    assert np.isnan(out["v"][0])
    codes = split_flags(out["v_flags"][0])
    assert "window_not_in_calendar" in codes
    assert "no_period" not in codes and "outside_grid_time" not in codes
    assert np.isnan(out["v_coverage"][0])  # no window, as for a row without a period


# ------------------------------------------------------------ one flag per row (item 8)
def test_bilinear_missing_neighbour_appears_once_with_several_missing_neighbours():
    v = np.array([[[1.0, np.nan], [np.nan, np.nan]]])
    g = make_grid(v, lat=[0.0, 1.0], lon=[0.0, 1.0])
    out = attach(table([0.5], [0.5], "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    # three of the four neighbours lack data: the one left carries the value (renormalised)
    assert_allclose(out["v"], [1.0], rtol=0, atol=0)
    assert split_flags(out["v_flags"][0]).count("bilinear_missing_neighbour") == 1


@pytest.mark.parametrize("stat", ["mean", "max"])
def test_provenance_records_a_baseline_only_where_the_statistic_uses_one(stat):
    g = make_grid(np.arange(24.0).reshape(24, 1, 1), lat=[0.5], lon=[0.5])
    t = table([0.5], [0.5], "2000-03-01", "2000-03-31")
    plain = attach(t, g, name="v", stat=stat).attrs["envlink"]["v"]
    assert "baseline" not in plain
    anomaly = attach(t, g, name="a", stat="anomaly").attrs["envlink"]["a"]
    assert anomaly["baseline"] == "2000-2001 (grid span)"


def pd_series(values):
    import pandas as pd

    return pd.Series(values)
