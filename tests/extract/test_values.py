"""Window statistics against direct NumPy indexing of the raw arrays."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from envlink.extract.attach import attach
from envlink.testing import make_grid

from ._grids import table

LAT = np.arange(-9.875, 10.0, 0.25)
LON = np.arange(100.125, 110.0, 0.25)


@pytest.fixture(scope="module")
def grid():
    return make_grid(lat=LAT, lon=LON, periods=48, seed=11)


@pytest.fixture(scope="module")
def rows():
    rng = np.random.default_rng(12)
    n = 60
    lat = rng.uniform(-9.9, 9.9, n)
    lon = rng.uniform(100.01, 109.99, n)
    start_m = rng.integers(0, 40, n)
    length = rng.integers(1, 8, n)
    months = pd.date_range("2000-01-01", periods=49, freq="MS")
    start = [months[s].strftime("%Y-%m-%d") for s in start_m]
    end = [(months[s + k] - pd.Timedelta(days=1)).strftime("%Y-%m-%d") for s, k in zip(start_m, length, strict=True)]
    return table(lat, lon, start, end), start_m, length


def _raw(grid, t):
    """Direct NumPy: cell by argmin of |Δlat|, |Δlon| on the raw axes; steps by month."""
    iy = np.abs(LAT[None, :] - t.site_lat.to_numpy()[:, None]).argmin(axis=1)
    ix = np.abs(LON[None, :] - t.site_lon.to_numpy()[:, None]).argmin(axis=1)
    return grid.values[:, iy, ix].T  # (rows, time)


def _month_days(grid):
    return ((grid.time_end.values - grid.time_start.values) / np.timedelta64(1, "D")).astype(float)


@pytest.mark.parametrize(
    "stat, numpy_fn",
    [
        ("min", np.min),
        ("max", np.max),
        ("quantile:0.9", lambda a: np.quantile(a, 0.9)),
        ("quantile:0", np.min),
    ],
)
def test_order_statistics_equal_numpy(grid, rows, stat, numpy_fn):
    t, s, k = rows
    out = attach(t, grid, name="v", stat=stat)
    raw = _raw(grid, t)
    expected = [numpy_fn(raw[r, s[r] : s[r] + k[r]]) for r in range(len(t))]
    assert_allclose(out["v"], expected, rtol=1e-12)
    assert (out["v_coverage"] == 1.0).all()


def test_duration_weighted_mean_std_and_equal_mean(grid, rows):
    t, s, k = rows
    raw = _raw(grid, t)
    days = _month_days(grid)
    m = attach(t, grid, name="v", stat="mean")
    sd = attach(t, grid, name="v", stat="std")
    eq = attach(t, grid, name="v", stat="mean", time_weights="equal")
    for r in range(len(t)):
        x, w = raw[r, s[r] : s[r] + k[r]], days[s[r] : s[r] + k[r]]
        # numpy.average with the days of each month as weights (duration weights)
        assert_allclose(m["v"][r], np.average(x, weights=w), rtol=1e-12)
        var = np.average((x - np.average(x, weights=w)) ** 2, weights=w)
        assert_allclose(sd["v"][r], np.sqrt(var), rtol=1e-9, atol=1e-12)
        assert_allclose(eq["v"][r], np.mean(x), rtol=1e-12)


def test_sum_above_degree_days(grid, rows):
    t, s, k = rows
    raw = _raw(grid, t)
    days = _month_days(grid)
    total = attach(t, grid, name="v", stat="sum")
    above = attach(t, grid, name="v", stat="above:20.5")
    dd = attach(t, grid, name="v", stat="degree-days", threshold=20.0)
    for r in range(len(t)):
        x, w = raw[r, s[r] : s[r] + k[r]], days[s[r] : s[r] + k[r]]
        assert_allclose(total["v"][r], x.sum(), rtol=1e-12)
        assert_allclose(above["v"][r], np.sum(w * (x > 20.5)) / w.sum(), rtol=1e-12)
        assert_allclose(dd["v"][r], np.sum(w * np.maximum(x - 20.0, 0.0)), rtol=1e-12)


def test_partial_steps_by_duration():
    # two monthly steps (Jan 31 d, Feb 29 d in 2000); window 2000-01-22 .. 2000-02-10:
    # 10 days of January and 10 of February
    g = make_grid(np.array([10.0, 20.0, 99.0]).reshape(3, 1, 1), lat=[0.5], lon=[0.5])
    t = table([0.5], [0.5], "2000-01-22", "2000-02-10")
    out = attach(t, g, name="v")
    assert_allclose(out["v"], [15.0], rtol=1e-12)
    total = attach(t, g, name="v", stat="sum")
    # each month counts by the fraction of its cell inside: 10/31 and 10/29
    assert_allclose(total["v"], [10.0 * 10 / 31 + 20.0 * 10 / 29], rtol=1e-12)
    eq = attach(t, g, name="v", time_weights="equal")
    assert_allclose(eq["v"], [15.0], rtol=1e-12)
    # a one-day window counts the whole day of the step it falls in (docs/extract.md, "Windows")
    one = attach(table([0.5], [0.5], "2000-02-29", "2000-02-29"), g, name="v")
    assert_allclose(one["v"], [20.0], rtol=0, atol=0)
    assert_allclose(one["v_coverage"], [1.0], rtol=0, atol=0)


def test_missing_steps_give_partial_coverage_and_min_coverage():
    v = np.array([1.0, np.nan, 3.0, 4.0]).reshape(4, 1, 1)
    g = make_grid(v, lat=[0.5], lon=[0.5], freq="D")
    t = table([0.5, 0.5], [0.5, 0.5], ["2000-01-01", "2000-01-02"], ["2000-01-03", "2000-01-02"])
    out = attach(t, g, name="v")
    assert_allclose(out["v"][0], 2.0, rtol=1e-12)
    assert_allclose(out["v_coverage"][0], 2 / 3, rtol=1e-12)
    assert out["v_flags"][0] == "partial_coverage"
    assert np.isnan(out["v"][1]) and out["v_flags"][1] == "no_data_in_window"
    strict = attach(t, g, name="v", min_coverage=0.9)
    assert np.isnan(strict["v"][0])
    assert strict["v_flags"][0] == "partial_coverage;below_min_coverage"


def test_window_partly_and_wholly_outside_grid_time():
    g = make_grid(np.arange(1.0, 4.0).reshape(3, 1, 1), lat=[0.5], lon=[0.5], freq="D")
    t = table([0.5, 0.5], [0.5, 0.5], ["1999-12-31", "2001-01-01"], ["2000-01-02", "2001-01-05"])
    out = attach(t, g, name="v")
    assert_allclose(out["v"][0], 1.5, rtol=1e-12)
    assert_allclose(out["v_coverage"][0], 2 / 3, rtol=1e-12)
    assert np.isnan(out["v"][1]) and out["v_flags"][1] == "outside_grid_time"


def test_docs_worked_example():
    # docs/extract.md: Jan 10, Feb 20, Mar 30 (2001: 31, 28, 31 days), hand-computed
    g = make_grid(np.array([10.0, 20.0, 30.0, 40.0]).reshape(4, 1, 1), lat=[0.5], lon=[0.5], start="2001-01-01")
    t = table([0.5], [0.5], "2001-01-01", "2001-03-31")
    expected = {
        "mean": 20.0, "min": 10.0, "max": 30.0, "sum": 60.0, "std": np.sqrt(6200.0 / 90.0),
        "quantile:0.5": 20.0, "above:15": 59.0 / 90.0, "degree-days:25": 155.0,
    }
    for stat, value in expected.items():
        assert_allclose(attach(t, g, name="v", stat=stat)["v"], [value], rtol=1e-12, err_msg=stat)


def test_std_of_one_value_or_equal_values_is_exactly_zero():
    # Population std of a single value, or of equal values, is 0 by definition
    # (common practice); cumulative-sum round-off must not leave ~1e-8.
    rng = np.random.default_rng(5)
    v = 25.0 + rng.normal(0.0, 2.0, (36, 1, 1))
    v[10:13] = 21.123456789
    g = make_grid(v, lat=[0.5], lon=[0.5], start="2000-01-01", freq="MS")
    t = table([0.5] * 4, [0.5] * 4, ["2000-12-01", "2001-03-01", "2000-11-01", "2001-01-01"],
              ["2000-12-31", "2001-03-10", "2001-01-31", "2001-02-28"])
    out = attach(t, g, name="v", stat="std")
    assert out["v"].tolist()[:3] == [0.0, 0.0, 0.0]
    # two different months: np.std with the months' day weights (31, 28)
    ref = np.sqrt(np.cov(v[12:14, 0, 0], aweights=[31, 28], ddof=0))
    assert_allclose(out["v"][3], ref, rtol=1e-9)
