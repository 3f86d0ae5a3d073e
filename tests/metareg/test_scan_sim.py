"""Seeded simulations of the window scan: a planted window is found; under no effect p is uniform.

Sources: the family-wise p of a permutation test is (super-)uniform under the null
by construction (Westfall & Young 1993, single-step maxT); checked here with a
Kolmogorov-Smirnov test (scipy.stats.kstest). The planted-window check is common
practice for scan methods: simulate effects from one window of a random field and
ask the scan to find it.

The uniformity check over 200 null replicates is slow; it runs when
``ENVLINK_SLOW_TESTS=1`` (a quick version is ``test_null_family_p_is_not_small_quick``
in test_scan.py).
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import envlink
from envlink.extract.family import WindowFamily, extract_family
from envlink.metareg.scan import scan_windows
from envlink.testing import make_grid


def _scenario(seed: int = 3, n_sites: int = 16, rows: int = 64):
    rng = np.random.default_rng(seed)
    lat = np.arange(4) + 0.5
    lon = np.arange(4) + 0.5
    grid = make_grid(rng.normal(20.0, 1.0, (72, 4, 4)), lat=lat, lon=lon, start="2000-01-01",
                     freq="MS")
    site = rng.integers(0, n_sites, rows)
    month = rng.integers(24, 70, rows)
    start = pd.to_datetime("2000-01-01") + pd.to_timedelta(month * 30.44, unit="D")
    table = pd.DataFrame({
        "site_lat": lat[site % 4], "site_lon": lon[site // 4],
        "period_start": start.strftime("%Y-%m-%d"),
        "period_end": (start + pd.Timedelta(days=20)).strftime("%Y-%m-%d"),
        "study": site // 2,
    })
    return rng, grid, table


def test_scan_recovers_the_planted_lag_and_span():
    rng, grid, table = _scenario()
    truth = WindowFamily.make(lags=2, spans=3, unit="M")
    x = extract_family(table, grid, truth).iloc[:, 0].to_numpy()
    v = rng.uniform(0.01, 0.03, len(table))
    table["y"] = 0.5 * (x - x.mean()) + rng.normal(0, np.sqrt(v))
    table["v"] = v
    r = envlink.scan(table, grid, effect="y", variance="v", lags="0..4", spans="1..4", unit="M",
                     n_permutations=99, seed=1)
    best = r.best_row
    assert (best["lag"], best["span"]) == (2, 3)
    assert r.n_windows == 20 and r.family_p <= 0.02
    assert r.heatmap("statistic").loc[2, 3] == best["statistic"]


@pytest.mark.slow
@pytest.mark.skipif(os.environ.get("ENVLINK_SLOW_TESTS") != "1",
                    reason="slow: set ENVLINK_SLOW_TESTS=1 (200 null replicates)")
def test_null_family_p_is_uniform_over_200_replicates():
    rng, grid, table = _scenario(seed=11)
    fam = WindowFamily.make(lags="0..3", spans="1..3", unit="M")
    cand = extract_family(table, grid, fam)
    ps = []
    for rep in range(200):
        v = rng.uniform(0.01, 0.03, len(table))
        df = table.assign(y=rng.normal(0, np.sqrt(v + 0.01)), v=v)
        r = scan_windows(df, cand, effect="y", variance="v", nested="study",
                         windows=fam.describe(), n_permutations=99, seed=rep)
        ps.append(r.family_p)
    assert stats.kstest(ps, "uniform").pvalue > 0.01
