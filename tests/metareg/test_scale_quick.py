"""A quick variant (k = 10^4) of tests/benchmarks/bench_metareg.py that runs in CI.

Reference: the tight blocked NumPy Fisher-scoring REML written in the benchmark
(one pass per iteration, DL start). Checks the same answer, no k×k (or any k-long
float64) temporary (tracemalloc peak), and float32 / Dask storage.
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
import pytest
from benchmarks.bench_metareg import BETA, TAU2, simulate, tight_reml
from numpy.testing import assert_allclose

from envlink.metareg import MetaRegression


@pytest.mark.quick_benchmark
def test_quick_benchmark_k1e4():
    k = 10_000
    y, v, X = simulate(k, seed=5)
    MetaRegression().fit(y=y[:100], v=v[:100], X=X[:100])  # warm up the kernel
    tracemalloc.start()
    t0 = time.perf_counter()
    m = MetaRegression(method="REML").fit(y=y, v=v, X=X)
    elapsed = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    # block-sized temporaries only: under half the input (a k×k matrix would be 800 MB)
    assert peak < 0.5 * (y.nbytes + v.nbytes + X.nbytes)
    ref = tight_reml(y, v, X)
    assert_allclose(m.tau2_, ref["tau2"], rtol=1e-8)
    assert_allclose(m.coef_, ref["coef"], rtol=1e-8)
    assert_allclose(m.se_, ref["se"], rtol=1e-8)
    # recovery of the simulated truth (wide: 4 SEs, one seeded draw)
    assert abs(m.tau2_ - TAU2) < 4 * m.tau2_se_
    assert np.all(np.abs(m.coef_ - BETA) < 4 * m.se_)
    assert elapsed < 5.0
    m32 = MetaRegression().fit(y=y.astype(np.float32), v=v.astype(np.float32),
                               X=X.astype(np.float32))
    assert abs(m32.tau2_ - m.tau2_) < 1e-3 * m.tau2_se_


@pytest.mark.quick_benchmark
@pytest.mark.requires_dask
def test_quick_benchmark_zarr_float32_out_of_core():
    from benchmarks.bench_metareg_zarr import BETA as TRUE_BETA
    from benchmarks.bench_metareg_zarr import TAU2 as TRUE_TAU2
    from benchmarks.bench_metareg_zarr import main

    res = main(["--quick"])
    ooc, mem = res["out_of_core"], res["in_memory"]
    # chunks read from the store in every pass give the in-memory answer (float32 storage)
    assert_allclose(ooc["tau2"], mem["tau2"], rtol=1e-10)
    assert_allclose(ooc["coef"], mem["coef"], rtol=1e-10)
    assert_allclose(ooc["tau2_ci"], mem["tau2_ci"], rtol=1e-10)
    assert ooc["passes"] <= 8 and mem["passes"] <= 8
    # recovery of the simulated truth (wide: 4 SEs, one seeded draw)
    assert abs(mem["tau2"] - TRUE_TAU2) < 4 * mem["tau2_se"]
    assert np.all(np.abs(np.array(mem["coef"]) - TRUE_BETA) < 4 * np.array(mem["se"]))
