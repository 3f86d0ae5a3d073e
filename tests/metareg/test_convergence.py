"""tau² convergence judged against the scale of the sampling variances, not an absolute floor.

References: an independent dense maximisation of the restricted and full
log-likelihoods with scipy.optimize.minimize_scalar (Viechtbauer 2005, J Educ Behav
Stat 30:261, eqs. for ℓ_R and ℓ), and scipy.optimize.brentq on the Paule-Mandel
equation y'P(τ²)y = k - p (Paule & Mandel 1982), written here with dense arrays.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import optimize

from envlink.metareg import MetaRegression


def _tiny(scale=1e-8, seed=4, k=40):
    """Sampling variances of order ``scale`` and a true tau² of 0.3 · scale."""
    rng = np.random.default_rng(seed)
    v = rng.uniform(0.5, 2.0, k) * scale
    x = rng.normal(size=k)
    y = 0.1 + 1e-4 * x + rng.normal(0, np.sqrt(v + 0.3 * scale))
    return pd.DataFrame({"effect": y, "variance": v, "x": x})


def _dense_loglik(df, t, restricted):
    y, v = df["effect"].to_numpy(), df["variance"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"]])
    w = 1 / (v + t)
    A = X.T @ (w[:, None] * X)
    r = y - X @ np.linalg.solve(A, X.T @ (w * y))
    out = np.sum(np.log(v + t)) + np.sum(w * r * r)
    return -0.5 * (out + (np.linalg.slogdet(A)[1] if restricted else 0.0))


def _dense_score(df, t, restricted):
    """d loglik / d tau²: ½ (y'PPy − tr P) for REML, ½ (Σ w² r² − Σ w) for ML, with dense P."""
    y, v = df["effect"].to_numpy(), df["variance"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"]])
    w = 1 / (v + t)
    P = np.diag(w) - (w[:, None] * X) @ np.linalg.solve(X.T @ (w[:, None] * X), X.T * w)
    Py = P @ y
    return 0.5 * (Py @ Py - (np.trace(P) if restricted else np.sum(w)))


@pytest.mark.parametrize("method,restricted", [("REML", True), ("ML", False)])
def test_tiny_tau2_matches_independent_maximisation(method, restricted):
    df = _tiny()
    m = MetaRegression(method=method, moderators="x").fit(df)
    # the optimiser works in units of 1e-9 so that its tolerance is relative
    res = optimize.minimize_scalar(lambda s: -_dense_loglik(df, s * 1e-9, restricted),
                                   bounds=(0.0, 20.0), method="bounded",
                                   options={"xatol": 1e-13, "maxiter": 2000})
    assert res.success and 1e-10 < res.x * 1e-9 < 1e-8  # an interior maximum near 3e-9
    # a coarse check: a bounded Brent search stops once the log-likelihood is flat to
    # about sqrt(machine eps), which places a maximum only to a few parts in 1e6
    # (scipy 1.17 stops here at 2.3e-6); the score root below is the tight check
    assert_allclose(m.tau2_, res.x * 1e-9, rtol=1e-5)
    # tighter: the root of the dense score (the derivative of the same log-likelihood)
    root = optimize.brentq(lambda s: _dense_score(df, s * 1e-9, restricted), 0.2, 20.0,
                           xtol=1e-14, rtol=1e-15) * 1e-9
    assert_allclose(m.tau2_, root, rtol=1e-9)


def test_tiny_tau2_paule_mandel_matches_brentq():
    df = _tiny(seed=9)
    m = MetaRegression(method="PM", moderators="x").fit(df)
    y, v = df["effect"].to_numpy(), df["variance"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"]])

    def q(t):
        w = 1 / (v + t)
        A = X.T @ (w[:, None] * X)
        r = y - X @ np.linalg.solve(A, X.T @ (w * y))
        return np.sum(w * r * r) - (len(y) - 2)

    assert q(0.0) > 0
    ref = optimize.brentq(q, 0.0, 1e-6, xtol=1e-22, rtol=1e-14)
    assert_allclose(m.tau2_, ref, rtol=1e-8)


@pytest.mark.parametrize("method", ["REML", "ML", "PM"])
def test_tau2_scales_with_the_variances(method):
    # effects times c and variances times c² give tau² times c² (common practice: the
    # model has no natural unit), down to the scale of 1e-8
    df = _tiny(scale=1.0, seed=2)
    c = 1e-4
    small = df.assign(effect=df["effect"] * c, variance=df["variance"] * c**2)
    big = MetaRegression(method=method, moderators="x").fit(df)
    tiny = MetaRegression(method=method, moderators="x").fit(small)
    assert big.tau2_ > 0
    assert_allclose(tiny.tau2_, big.tau2_ * c**2, rtol=1e-7)
