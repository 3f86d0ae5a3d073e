"""CR2 cluster-robust standard errors with Satterthwaite df, against dense references.

References: an independent dense-matrix computation written here following Tipton
(2015, Psychological Methods 20:375-393) in the Cholesky form of Pustejovsky & Tipton
(2018, J Bus Econ Stat 36:672-683): ``A_j = D_jᵀ B_j^{-1/2} D_j`` with
``D_jᵀ D_j = W_j`` and ``B_j = D_j [(I - H) Φ (I - H)ᵀ]_jj D_jᵀ``; and statsmodels
0.15 ``WLS(...).fit(cov_type="cluster")`` for the CR0 / CR1 sandwich.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import linalg
from statsmodels.regression.linear_model import WLS

from envlink.metareg import MetaRegression
from envlink.metareg.inference import cluster_robust


def _data(seed=11, J=12):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 6, J)
    cl = np.repeat(np.arange(J), sizes)
    k = cl.size
    x = rng.normal(size=k)
    z = rng.integers(0, 2, k).astype(float)
    v = rng.uniform(0.02, 0.1, k)
    y = 0.1 + 0.2 * x - 0.1 * z + rng.normal(0, 0.2, J)[cl] + rng.normal(0, np.sqrt(v))
    return pd.DataFrame({"cl": [f"c{j}" for j in cl], "x": x, "z": z, "yi": y, "vi": v})


def _dense_cr2(y, X, Phi, cl):
    """Dense CR2 covariance and Satterthwaite df, with k×k matrices throughout."""
    k, p = X.shape
    W = np.linalg.inv(Phi)
    M = np.linalg.inv(X.T @ W @ X)
    b = M @ X.T @ W @ y
    e = y - X @ b
    H = X @ M @ X.T @ W
    Om = (np.eye(k) - H) @ Phi @ (np.eye(k) - H).T
    Afull = np.zeros((k, k))
    for g in np.unique(cl):
        r = np.flatnonzero(cl == g)
        Dj = np.linalg.cholesky(W[np.ix_(r, r)]).T  # upper triangular, Dᵀ D = W_j
        Bj = Dj @ Om[np.ix_(r, r)] @ Dj.T
        Aj = Dj.T @ np.real(linalg.inv(linalg.sqrtm(Bj))) @ Dj
        Afull[np.ix_(r, r)] = Aj
    V = np.zeros((p, p))
    for g in np.unique(cl):
        r = np.flatnonzero(cl == g)
        u = X[r].T @ Afull[np.ix_(r, r)] @ e[r]
        V += np.outer(u, u)
    V = M @ V @ M
    df = np.empty(p)
    for c in range(p):
        G = Afull.T @ X @ M[:, c]  # stacked g_j
        groups = [np.flatnonzero(cl == g) for g in np.unique(cl)]
        E = sum(G[r] @ Om[np.ix_(r, r)] @ G[r] for r in groups)
        Var = 2 * sum((G[r] @ Om[np.ix_(r, s)] @ G[s]) ** 2 for r in groups for s in groups)
        df[c] = 2 * E**2 / Var
    return b, V, df


@pytest.mark.parametrize("method", ["REML", "DL"])
def test_cr2_independent_matches_dense(method):
    df = _data()
    m = MetaRegression(method=method, moderators="x + z", cluster="cl").fit(df, effect="yi",
                                                                           variance="vi")
    y = df["yi"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"], df["z"]])
    Phi = np.diag(df["vi"].to_numpy() + m.tau2_)
    b, V, dfs = _dense_cr2(y, X, Phi, df["cl"].to_numpy())
    assert_allclose(m.coef_, b, rtol=1e-10)
    assert_allclose(m.vcov_, V, rtol=1e-8, atol=1e-14)
    assert_allclose(m.coefficients_["df"], dfs, rtol=1e-8)
    d = m.to_dict()
    assert d["test"] == "t" and d["df"] == 11
    assert_allclose([c["df"] for c in d["coefficients"]], dfs, rtol=1e-8)


def test_cr2_multilevel_matches_dense():
    df = _data(seed=5, J=15)
    df["study"] = df["cl"] + "_" + (np.arange(len(df)) % 2).astype(str)  # 2 studies per cluster
    m = MetaRegression(moderators="x", nested="study", cluster="cl").fit(df, effect="yi",
                                                                        variance="vi")
    s1, s2 = m.variance_components_.values()
    st = pd.factorize(df["study"])[0]
    Phi = np.diag(df["vi"].to_numpy() + s2) + s1 * (st[:, None] == st[None, :])
    X = np.column_stack([np.ones(len(df)), df["x"]])
    b, V, dfs = _dense_cr2(df["yi"].to_numpy(), X, Phi, df["cl"].to_numpy())
    assert_allclose(m.coef_, b, rtol=1e-8)
    assert_allclose(m.vcov_, V, rtol=1e-7, atol=1e-14)
    assert_allclose(m.coefficients_["df"], dfs, rtol=1e-7)


@pytest.mark.parametrize("kind,correction", [("CR0", False), ("CR1", True)])
def test_cr0_cr1_match_statsmodels(kind, correction):
    # statsmodels WLS cluster sandwich; use_correction=True is G/(G-1) (N-1)/(N-p)
    df = _data()
    m = MetaRegression(moderators="x + z").fit(df, effect="yi", variance="vi")
    y = df["yi"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"], df["z"]])
    w = 1 / (df["vi"].to_numpy() + m.tau2_)
    groups = pd.factorize(df["cl"])[0]
    ref = WLS(y, X, weights=w).fit(cov_type="cluster",
                                   cov_kwds={"groups": groups, "use_correction": correction})
    rows = [np.flatnonzero(groups == g) for g in range(groups.max() + 1)]
    rf = cluster_robust(X, y - X @ ref.params, [np.diag(1 / w[r]) for r in rows], rows, kind=kind)
    assert_allclose(rf.vcov, ref.cov_params(), rtol=1e-8)
