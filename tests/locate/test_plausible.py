"""Plausible windows for imprecise dates: each rule of docs/inference.md, seeded.

Sources: the rules are envlink's own (docs/inference.md, "Imprecise dates"); the
checks are by construction (a drawn sub-window lies in its period and has the stated
length; each reading of an ambiguous date is one that parse_period gives with the
order or hemisphere fixed) and a chi-square test of uniform placement (scipy.stats,
common practice).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from envlink.errors import InputError
from envlink.locate.periods import parse_period
from envlink.locate.plausible import draw_periods
from envlink.locate.sites import locate


def _located(when, effort, lat=-9.0):
    t = pd.DataFrame({"when": when, "days": effort, "lat": lat, "lon": 120.0})
    return locate(t, lat="lat", lon="lon", period="when")


def test_sub_window_inside_the_period_of_the_stated_length_and_uniform():
    loc = _located(["2004", "March 2005", "3-9 May 2006"], [10, 5, 2])
    p = draw_periods(loc, 400, seed=1, effort="days", period="when")
    assert p.rule == ["sub-window", "sub-window", "fixed"]
    s = pd.to_datetime(pd.Series(p.start[:, 0]))
    e = pd.to_datetime(pd.Series(p.end[:, 0]))
    assert ((e - s).dt.days == 9).all()
    assert (s >= "2004-01-01").all() and (e <= "2004-12-31").all()
    # starts uniform over the 357 possible days: 4 equal bins, chi-square (common practice)
    counts = np.histogram((s - pd.Timestamp("2004-01-01")).dt.days, bins=4, range=(0, 357))[0]
    assert stats.chisquare(counts).pvalue > 0.001
    assert set(p.start[:, 2]) == {"2006-05-03"}  # a day-precision period is taken as stated
    again = draw_periods(loc, 400, seed=1, effort="days", period="when")
    assert (again.start == p.start).all()


def test_ambiguous_day_month_and_season_take_each_reading():
    loc = _located(["05/06/2011", "summer 2010", "2011"], [None, None, None])
    assert loc["period_start"].isna().tolist()[:2] == [True, True]
    p = draw_periods(loc, 200, seed=3, period="when")
    assert p.rule == ["day/month order", "season reading", "fixed"]
    assert set(p.start[:, 0]) == {"2011-06-05", "2011-05-06"}
    austral = parse_period("summer 2010", hemisphere="south", plain_season_south="austral")
    boreal = parse_period("summer 2010", hemisphere="south", plain_season_south="boreal")
    assert set(p.start[:, 1]) == {austral.start.isoformat(), boreal.start.isoformat()}
    share = np.mean(p.start[:, 0] == "2011-06-05")
    assert 0.35 < share < 0.65  # equal chance (binomial, 200 draws)
    assert p.counts == {"fixed": 1, "sub-window": 0, "day/month order": 1, "season reading": 1}


def test_missing_columns_are_named():
    loc = _located(["2004"], [10])
    with pytest.raises(InputError, match="effortx"):
        draw_periods(loc, 3, effort="effortx")
