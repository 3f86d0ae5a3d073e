"""float32 storage and Dask arrays give the same fit as float64 NumPy (sums in float64)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from envlink.metareg import MetaRegression
from envlink.metareg._kernels import weighted_sums


def _sim(k=50_000, seed=1):
    rng = np.random.default_rng(seed)
    n = rng.integers(12, 401, k)
    v = 1.0 / (n - 3)  # Fisher's z sampling variance
    X = rng.normal(size=(k, 2))
    y = 0.1 + X @ np.array([0.05, -0.03]) + rng.normal(0, 0.1, k) + rng.normal(0, np.sqrt(v))
    return y, v, X


def test_numba_kernel_equals_numpy_blocks():
    y, v, X = _sim(20_000)
    a = weighted_sums(y, v, X, True, 0.01, use_numba=True)
    b = weighted_sums(y, v, X, True, 0.01, use_numba=False)
    for name in ("A", "B", "C", "b1", "b2", "sw", "sw2", "syy1", "syy2", "slog"):
        assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-11)


def test_float32_storage_same_answer():
    y, v, X = _sim()
    ref = MetaRegression().fit(y=y, v=v, X=X)
    y32, v32, X32 = (a.astype(np.float32) for a in (y, v, X))
    # the float64 fit of the float32-rounded data is the reference for float32 storage
    ref32 = MetaRegression().fit(y=y32.astype(np.float64), v=v32.astype(np.float64),
                                 X=X32.astype(np.float64))
    m = MetaRegression().fit(y=y32, v=v32, X=X32)
    assert_allclose(m.tau2_, ref32.tau2_, rtol=1e-9)
    assert_allclose(m.coef_, ref32.coef_, rtol=1e-9)
    assert_allclose(m.se_, ref32.se_, rtol=1e-9)
    # and rounding the data to float32 moves the estimates far less than their SEs
    assert np.all(np.abs(m.coef_ - ref.coef_) < 0.01 * ref.se_)


@pytest.mark.requires_dask
def test_dask_same_answer():
    import dask.array as da

    y, v, X = _sim()
    ref = MetaRegression(test="knapp-hartung").fit(y=y, v=v, X=X)
    m = MetaRegression(test="knapp-hartung").fit(
        y=da.from_array(y, chunks=7_000), v=da.from_array(v, chunks=7_000),
        X=da.from_array(X, chunks=(9_000, 2)))
    assert_allclose(m.tau2_, ref.tau2_, rtol=1e-9)
    assert_allclose(m.coef_, ref.coef_, rtol=1e-9)
    assert_allclose(m.se_, ref.se_, rtol=1e-9)
    assert_allclose(m.tau2_ci_, ref.tau2_ci_, rtol=1e-8)
    for method in ("HE", "SJ", "PM"):
        a = MetaRegression(method=method).fit(y=da.from_array(y, chunks=10_000),
                                              v=da.from_array(v, chunks=10_000),
                                              X=da.from_array(X, chunks=(10_000, 2)))
        b = MetaRegression(method=method).fit(y=y, v=v, X=X)
        assert_allclose(a.tau2_, b.tau2_, rtol=1e-9)


@pytest.mark.requires_dask
def test_dask_with_missing_rows_and_clusters():
    import dask.array as da

    y, v, X = _sim(3_000, seed=4)
    y[5] = np.nan
    cl = np.arange(3_000) // 30
    with pytest.warns(UserWarning, match="1 row"):
        ref = MetaRegression(cluster=cl).fit(y=y, v=v, X=X)
    with pytest.warns(UserWarning, match="1 row"):
        m = MetaRegression(cluster=cl).fit(y=da.from_array(y, chunks=1_000),
                                           v=da.from_array(v, chunks=1_000),
                                           X=da.from_array(X, chunks=(1_000, 2)))
    assert m.n_dropped_ == ref.n_dropped_ == 1
    assert_allclose(m.se_, ref.se_, rtol=1e-9)
    assert_allclose(m.coefficients_["df"], ref.coefficients_["df"], rtol=1e-9)
