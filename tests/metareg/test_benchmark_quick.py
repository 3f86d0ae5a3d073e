"""Quick variant of tests/benchmarks/bench_permutations.py and bench_scan.py (a few seconds).

Checks, at a small size, what the full benchmarks measure: the stacked permutation
path is much faster than one refit per permutation and gives the same p (the
straightforward loop is the reference, as in test_permutation.py), and a scan's
model part refits windows x permutations far faster than single fits would.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
import pytest

from envlink.metareg import MetaRegression
from envlink.metareg.permutation import permutation_test_model
from envlink.metareg.scan import scan_windows


def _data(k: int = 120, studies: int = 40, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    study = np.sort(rng.integers(0, studies, k))
    v = rng.uniform(0.01, 0.08, k)
    x = rng.normal(size=k)
    y = 0.05 * x + rng.normal(0, 0.25, studies)[study] + rng.normal(0, np.sqrt(v + 0.01))
    return pd.DataFrame({"y": y, "v": v, "x": x, "study": study})


@pytest.mark.quick_benchmark
@pytest.mark.parametrize("nested", [None, "study"])
def test_stacked_permutations_beat_the_refit_loop(nested):
    df = _data()
    m = MetaRegression(moderators="x", nested=nested).fit(df, effect="y", variance="v")
    t = time.perf_counter()
    fast = permutation_test_model(m, 400, 3, progress=False)
    per_fast = (time.perf_counter() - t) / 400
    t = time.perf_counter()
    loop = permutation_test_model(m, 20, 3, engine="refit", progress=False)
    per_loop = (time.perf_counter() - t) / 20
    assert per_loop > 5 * per_fast, (per_loop, per_fast)
    head = permutation_test_model(m, 20, 3, progress=False)
    assert head.terms["p"].tolist() == loop.terms["p"].tolist()
    assert fast.n_permutations == 400


@pytest.mark.quick_benchmark
def test_scan_model_part_is_fast():
    df = _data(k=90, studies=30)
    rng = np.random.default_rng(2)
    cand = pd.DataFrame(rng.normal(size=(len(df), 20)), columns=[f"w{j}" for j in range(20)])
    t = time.perf_counter()
    r = scan_windows(df, cand, effect="y", variance="v", nested="study", n_permutations=49,
                     seed=1)
    took = time.perf_counter() - t
    assert r.n_windows == 20 and took < 60  # 1000 refits; a single-fit loop takes ~100 s here
