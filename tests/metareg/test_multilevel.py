"""Multilevel (effects nested in studies) REML / ML against an independent dense likelihood.

Reference: the (restricted) log-likelihood of the three-level model (Konstantopoulos
2011), written here with dense k×k matrices and maximised with scipy.optimize
(Nelder-Mead on the square roots of the components, then bounded L-BFGS-B).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import optimize

from envlink.metareg import MetaRegression


def _simulate(seed=3, S=25):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 5, S)
    study = np.repeat(np.arange(S), sizes)
    k = study.size
    x = rng.normal(size=k)
    v = rng.uniform(0.01, 0.08, k)
    y = 0.2 + 0.3 * x + rng.normal(0, 0.25, S)[study] + rng.normal(0, 0.12, k) + rng.normal(0, np.sqrt(v))
    return pd.DataFrame({"study": [f"s{j:02d}" for j in study], "x": x, "es": y, "es_var": v})


def _negll(theta, y, v, X, study, reml):
    s1, s2 = theta
    same = (study[:, None] == study[None, :]).astype(float)
    V = np.diag(v + s2) + s1 * same
    Vi = np.linalg.inv(V)
    F = X.T @ Vi @ X
    b = np.linalg.solve(F, X.T @ Vi @ y)
    r = y - X @ b
    out = 0.5 * (np.linalg.slogdet(V)[1] + r @ Vi @ r)
    if reml:
        out += 0.5 * np.linalg.slogdet(F)[1]
    return out


def _reference(df, reml):
    y = df["es"].to_numpy()
    v = df["es_var"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"].to_numpy()])
    study = pd.factorize(df["study"])[0]
    nm = optimize.minimize(lambda s: _negll(s**2, y, v, X, study, reml), [0.3, 0.3],
                           method="Nelder-Mead", options={"xatol": 1e-12, "fatol": 1e-14,
                                                          "maxiter": 20000})
    fine = optimize.minimize(_negll, nm.x**2, args=(y, v, X, study, reml), method="L-BFGS-B",
                             bounds=[(0, None)] * 2, options={"ftol": 1e-16, "gtol": 1e-12})
    return fine.x if fine.fun <= nm.fun else nm.x**2, y, v, X, study


@pytest.mark.parametrize("method", ["REML", "ML"])
def test_multilevel_matches_dense_scipy(method):
    df = _simulate()
    ref, y, v, X, study = _reference(df, method == "REML")
    m = MetaRegression(method=method, moderators="x", nested="study").fit(df, effect="es",
                                                                         variance="es_var")
    comps = np.array(list(m.variance_components_.values()))
    assert list(m.variance_components_) == ["between_study", "within_study"]
    assert_allclose(comps, ref, rtol=1e-5)
    # the envlink optimum is at least as good as the reference's
    assert _negll(comps, y, v, X, study, method == "REML") <= _negll(ref, y, v, X, study,
                                                                    method == "REML") + 1e-9
    same = (study[:, None] == study[None, :]).astype(float)
    Vi = np.linalg.inv(np.diag(v + comps[1]) + comps[0] * same)
    F = X.T @ Vi @ X
    assert_allclose(m.coef_, np.linalg.solve(F, X.T @ Vi @ y), rtol=1e-8)
    assert_allclose(m.vcov_, np.linalg.inv(F), rtol=1e-8)
    # multilevel I² split: each component over (components + typical sampling variance)
    w = 1 / v
    P0 = np.diag(w) - (np.diag(w) @ X) @ np.linalg.inv(X.T @ np.diag(w) @ X) @ (X.T @ np.diag(w))
    s2 = (len(y) - 2) / np.trace(P0)
    tot = comps.sum() + s2
    assert_allclose(list(m.I2_components_.values()), 100 * comps / tot, rtol=1e-8)
    assert_allclose(m.I2_, 100 * comps.sum() / tot, rtol=1e-8)
    d = m.to_dict()
    assert d["variance_components"]["between_study"] == pytest.approx(comps[0], rel=1e-12)
    assert d["heterogeneity"]["tau2_interval"] == {"low": None, "high": None, "method": "Q-profile"}
    assert any("Q-profile" in w for w in d["warnings"])


def test_multilevel_rejects_moment_methods():
    df = _simulate()
    from envlink.errors import InputError

    with pytest.raises(InputError, match="'REML' or 'ML' for a nested"):
        MetaRegression(method="DL", nested="study").fit(df, effect="es", variance="es_var")
