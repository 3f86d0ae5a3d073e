"""Window statistics on random day-level windows against a per-row brute force over days.

The brute force expands every monthly step into its days (pandas date arithmetic) and
applies the definitions of docs/extract.md directly, one row at a time.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from envlink.extract.attach import attach
from envlink.testing import make_grid

from ._grids import table

N_STEPS = 30


@pytest.fixture(scope="module")
def case():
    rng = np.random.default_rng(41)
    v = 20.0 + rng.normal(0, 3, (N_STEPS, 1, 1))
    v[rng.random(N_STEPS) < 0.15] = np.nan
    g = make_grid(v, lat=[0.5], lon=[0.5], start="2001-01-01")
    t0 = pd.Timestamp("2000-12-01")
    starts = [t0 + pd.Timedelta(days=int(d)) for d in rng.integers(0, 900, 80)]
    ends = [s + pd.Timedelta(days=int(k)) for s, k in zip(starts, rng.integers(0, 200, 80), strict=True)]
    t = table([0.5] * 80, [0.5] * 80, [s.strftime("%Y-%m-%d") for s in starts], [e.strftime("%Y-%m-%d") for e in ends])
    return g, v[:, 0, 0], starts, ends, t


def _brute(v, start, end, weights):
    """Per-day expansion: (step index, days of the step in the window) for overlapping steps."""
    edges = pd.date_range("2001-01-01", periods=N_STEPS + 1, freq="MS")
    days = pd.date_range(start, end, freq="D")
    inside = days[(days >= edges[0]) & (days < edges[-1])]
    step = np.searchsorted(edges, inside, side="right") - 1
    steps, counts = np.unique(step, return_counts=True)
    lengths = np.diff(edges).astype("timedelta64[D]").astype(float)
    x = v[steps]
    ok = np.isfinite(x)
    w = counts.astype(float) if weights == "duration" else np.ones(steps.size)
    cov = counts[ok].sum() / len(days)
    frac = counts / lengths[steps] if weights == "duration" else np.ones(steps.size)
    dd_days = counts if weights == "duration" else lengths[steps]
    return x[ok], w[ok], frac[ok], dd_days[ok], cov


@pytest.mark.parametrize("weights", ["duration", "equal"])
def test_random_windows_against_brute_force(case, weights):
    g, v, starts, ends, t = case
    got = {s: attach(t, g, name="v", stat=s, time_weights=weights, min_coverage=0.0)
           for s in ("mean", "sum", "std", "above:21", "degree-days:19", "min", "max")}
    for r in range(len(t)):
        x, w, frac, dd_days, cov = _brute(v, starts[r], ends[r], weights)
        assert_allclose(got["mean"]["v_coverage"][r], cov, rtol=1e-12, atol=1e-12)
        if x.size == 0:
            assert all(np.isnan(got[s]["v"][r]) for s in got)
            continue
        m = np.average(x, weights=w)
        assert_allclose(got["mean"]["v"][r], m, rtol=1e-12)
        assert_allclose(got["sum"]["v"][r], np.sum(frac * x), rtol=1e-12)
        assert_allclose(got["std"]["v"][r], np.sqrt(np.average((x - m) ** 2, weights=w)), rtol=1e-7, atol=1e-9)
        assert_allclose(got["above:21"]["v"][r], np.sum(w * (x > 21)) / w.sum(), rtol=1e-12, atol=1e-15)
        assert_allclose(got["degree-days:19"]["v"][r], np.sum(dd_days * np.maximum(x - 19, 0)), rtol=1e-12, atol=1e-12)
        assert_allclose(got["min"]["v"][r], x.min(), rtol=0, atol=0)
        assert_allclose(got["max"]["v"][r], x.max(), rtol=0, atol=0)
