"""Anomalies, MMM and degree heating weeks against hand computation and NumPy."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_allclose
from reference import heat_stress as hs

from envlink.errors import InputError
from envlink.extract.attach import attach
from envlink.testing import make_grid

from ._grids import daily_point_grid, table


def _day(n: int) -> str:
    return str(np.datetime64("2010-01-01") + np.timedelta64(n, "D"))


@pytest.fixture(scope="module")
def dhw_grid():
    return daily_point_grid(hs.SST, start="2010-01-01")


def test_dhw_window_maxima_hand_computed(dhw_grid):
    # Liu et al. 2014; Skirving et al. 2020 (tests/reference/heat_stress.py)
    starts, ends, expected = zip(*hs.WINDOW_MAX, strict=True)
    out = attach(table([0.5] * 4, [0.5] * 4, starts, ends), dhw_grid, name="dhw", stat="dhw-max", mmm=hs.MMM)
    assert_allclose(out["dhw"], expected, rtol=1e-12, atol=1e-12)


def test_dhw_by_day_including_0p8_and_exactly_1(dhw_grid):
    days = sorted(hs.DHW_BY_DAY)
    dates = [_day(d) for d in days]
    out = attach(table([0.5] * len(days), [0.5] * len(days), dates, dates), dhw_grid,
                 name="dhw", stat="dhw-max", mmm=hs.MMM)
    # day 10 (HotSpot 0.8) adds nothing; day 11 (HotSpot exactly 1.0) adds 1/7
    assert_allclose(out["dhw"], [hs.DHW_BY_DAY[d] for d in days], rtol=1e-12, atol=1e-12)


def test_dhw_hotspot_of_one_survives_float32_storage():
    # 29.3 stored as float32 is 29.2999992; with MMM 28.3 the HotSpot is 0.9999992,
    # which is 1.0 at the data's precision and must accumulate
    sst = np.array([27.0] * 5 + [29.3], dtype=np.float32)
    g = daily_point_grid(sst.astype(np.float64), start="2010-01-01").astype(np.float32)
    out = attach(table([0.5], [0.5], "2010-01-06", "2010-01-06"), g, name="dhw", stat="dhw-max", mmm=28.3)
    assert_allclose(out["dhw"], [1.0 / 7.0], rtol=1e-6)
    assert out["dhw_flags"][0] == "dhw_short_history"


def test_dhw_mmm_from_climatology_grid(dhw_grid):
    clim = xr.DataArray([[hs.MMM]], dims=("lat", "lon"), coords={"lat": [0.4], "lon": [0.6]})
    out = attach(table([0.5], [0.5], "2010-01-01", "2010-04-30"), dhw_grid, name="dhw", stat="dhw-max", mmm=clim)
    assert_allclose(out["dhw"], [19.0 / 7.0], rtol=1e-12)


def test_dhw_mmm_climatology_not_reaching_the_site(dhw_grid):
    # never the edge value of a climatology that does not cover the site (docs/extract.md, flag no_mmm)
    clim = xr.DataArray([[hs.MMM, hs.MMM]], dims=("lat", "lon"), coords={"lat": [20.0], "lon": [0.0, 1.0]})
    out = attach(table([0.5], [0.5], "2010-01-01", "2010-04-30"), dhw_grid, name="dhw", stat="dhw-max", mmm=clim)
    assert np.isnan(out["dhw"][0]) and out["dhw_flags"][0].split(";")[0] == "no_mmm"


def test_dhw_needs_daily_data():
    g = make_grid(lat=[0.5], lon=[0.5], periods=12, seed=1)
    with pytest.raises(InputError, match="needs a daily grid"):
        attach(table([0.5], [0.5], "2000-01-01", "2000-03-31"), g, name="dhw", stat="dhw-max", mmm=28.0)


def _seasonal_monthly(years: int = 6):
    months = np.arange(12 * years)
    rng = np.random.default_rng(21)
    v = 27.0 + 2.0 * np.sin(2 * np.pi * months / 12.0) + 0.05 * months / 12.0 + rng.normal(0, 0.2, months.size)
    return make_grid(v[:, None, None], lat=[0.5], lon=[0.5], start="2000-01-01"), v


def test_mmm_from_baseline_monthly():
    g, v = _seasonal_monthly()
    out = attach(table([0.5], [0.5], "", ""), g, name="m", stat="mmm", baseline="2001-2004")
    # NumPy: mean of each calendar month over 2001-2004, then the maximum
    clim = v[12:60].reshape(4, 12).mean(axis=0)
    assert_allclose(out["m"], [clim.max()], rtol=1e-12)
    assert out.attrs["envlink"]["m"]["baseline"] == "2001-2004"
    whole = attach(table([0.5], [0.5], "", ""), g, name="m", stat="mmm")
    assert_allclose(whole["m"], [v.reshape(6, 12).mean(axis=0).max()], rtol=1e-12)
    assert whole.attrs["envlink"]["m"]["baseline"] == "2000-2005 (grid span)"


def test_mmm_from_daily_uses_monthly_means():
    rng = np.random.default_rng(5)
    days = 365 + 366 + 365  # 2010 .. 2012
    v = 27.0 + rng.normal(0, 1, days)
    g = daily_point_grid(v, start="2010-01-01")
    out = attach(table([0.5], [0.5], "", ""), g, name="m", stat="mmm")
    dates = np.datetime64("2010-01-01") + np.arange(days)
    ym = dates.astype("datetime64[M]")
    monthly = np.array([v[ym == m].mean() for m in np.unique(ym)])
    assert_allclose(out["m"], [monthly.reshape(3, 12).mean(axis=0).max()], rtol=1e-12)


def test_dhw_with_mmm_from_baseline():
    sst = np.full(365, 27.0)
    sst[200:210] = 29.5
    g = daily_point_grid(sst, start="2010-01-01")
    out = attach(table([0.5], [0.5], "2010-01-01", "2010-12-31"), g, name="dhw", stat="dhw-max")
    # by hand: July's mean (days 181-211 hold the 10 warm days) is the MMM
    mmm = (21 * 27.0 + 10 * 29.5) / 31
    assert_allclose(out["dhw"], [10 * (29.5 - mmm) / 7.0], rtol=1e-12)


def test_anomaly_against_monthly_climatology():
    g, v = _seasonal_monthly()
    t = table([0.5, 0.5], [0.5, 0.5], ["2003-02-01", "2005-06-01"], ["2003-04-30", "2005-06-30"])
    out = attach(t, g, name="a", stat="anomaly", baseline="2000-2002")
    clim = v[:36].reshape(3, 12).mean(axis=0)
    days = np.array([28, 31, 30], dtype=float)  # Feb-Apr 2003
    exp0 = np.average(v[37:40] - clim[1:4], weights=days)
    exp1 = v[65] - clim[5]
    assert_allclose(out["a"], [exp0, exp1], rtol=1e-9)


def test_anomaly_against_daily_climatology():
    rng = np.random.default_rng(8)
    dates = pd.date_range("2010-01-01", "2012-12-31", freq="D")
    v = 26.0 + rng.normal(0, 1, dates.size)
    g = daily_point_grid(v, start="2010-01-01")
    out = attach(table([0.5], [0.5], "2012-02-27", "2012-03-02"), g, name="a", stat="anomaly", baseline="2010-2011")
    # pandas: mean of the same calendar days (month, day) over 2010-2011; 29 Feb has none
    s = pd.Series(v, index=dates)
    base = s["2010":"2011"]
    clim = base.groupby([base.index.month, base.index.day]).mean()
    win = s["2012-02-27":"2012-03-02"]
    anom = [x - clim.get((d.month, d.day), np.nan) for d, x in win.items()]
    assert_allclose(out["a"], [np.nanmean(anom)], rtol=1e-12)
    assert out["a_flags"][0] == "partial_coverage"  # 29 February has no baseline day


def test_anomaly_of_a_day_without_baseline_says_so_not_no_data():
    # 29 February 2012 against a 2010-2011 baseline: the cell has data that day, but
    # no baseline day of the same calendar day exists (pandas: no (2, 29) key).
    rng = np.random.default_rng(9)
    dates = pd.date_range("2010-01-01", "2012-12-31", freq="D")
    v = 26.0 + rng.normal(0, 1, dates.size)
    g = daily_point_grid(v, start="2010-01-01")
    base = pd.Series(v, index=dates)["2010":"2011"]
    assert (2, 29) not in base.groupby([base.index.month, base.index.day]).mean().index
    t = table([0.5, 0.5], [0.5, 0.5], ["2012-02-29", "2013-06-01"], ["2012-02-29", "2013-06-30"])
    out = attach(t, g, name="a", stat="anomaly", baseline="2010-2011")
    assert np.isnan(out["a"]).all()
    assert out["a_flags"].tolist() == ["no_baseline_in_window", "outside_grid_time"]
    assert out["a_coverage"][0] == 0.0
