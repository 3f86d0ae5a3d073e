"""Leave-one-out, standardised residuals and Cook's distances against dense references.

References: closed-form DL refits written here (DerSimonian & Laird 1986) for the
leave-one-out estimates; the residual variance ``diag(V - X (XᵀV⁻¹X)⁻¹ Xᵀ)`` of the
marginal model (Viechtbauer & Cheung 2010, Research Synthesis Methods 1:112-125) for
standardised residuals and their definition of Cook's distance.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference.bcg import table

from envlink.metareg import MetaRegression


def _dl(y, v, X):
    w = 1 / v
    XtW = X.T * w
    b = np.linalg.solve(XtW @ X, XtW @ y)
    Q = np.sum(w * (y - X @ b) ** 2)
    P = np.diag(w) - XtW.T @ np.linalg.solve(XtW @ X, XtW)
    t2 = max(0.0, (Q - (len(y) - X.shape[1])) / np.trace(P))
    Vb = np.linalg.inv((X.T / (v + t2)) @ X)
    return Vb @ ((X.T / (v + t2)) @ y), Vb, t2


@pytest.fixture(scope="module")
def fitted():
    df = table()
    m = MetaRegression(method="DL", moderators="latitude_abs").fit(df, effect="es", variance="es_var")
    y, v = df["es"].to_numpy(), df["es_var"].to_numpy()
    X = np.column_stack([np.ones(13), df["latitude_abs"].to_numpy(float)])
    return m, y, v, X


def test_leave_one_out_matches_refits(fitted):
    m, y, v, X = fitted
    loo = m.leave_one_out()
    assert len(loo) == 13
    for i in range(13):
        keep = np.arange(13) != i
        b, Vb, t2 = _dl(y[keep], v[keep], X[keep])
        assert_allclose(loo.iloc[i][["intercept", "latitude_abs"]].to_numpy(float), b, rtol=1e-8)
        assert_allclose(loo.iloc[i]["se_latitude_abs"], np.sqrt(Vb[1, 1]), rtol=1e-8)
        assert_allclose(loo.iloc[i]["tau2"], t2, rtol=1e-8, atol=1e-15)


def test_standardized_residuals(fitted):
    m, y, v, X = fitted
    b, Vb, t2 = _dl(y, v, X)
    e = y - X @ b
    var = v + t2 - np.einsum("ij,jk,ik->i", X, Vb, X)
    r = m.standardized_residuals()
    assert_allclose(r["z"], e / np.sqrt(var), rtol=1e-8)
    assert not r["dropped"].any()


def test_cooks_distance(fitted):
    m, y, v, X = fitted
    b, Vb, _ = _dl(y, v, X)
    ref = []
    for i in range(13):
        keep = np.arange(13) != i
        bi = _dl(y[keep], v[keep], X[keep])[0]
        ref.append((b - bi) @ np.linalg.inv(Vb) @ (b - bi))
    assert_allclose(m.cooks_distance().to_numpy(), ref, rtol=1e-7)
