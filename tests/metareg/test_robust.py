"""CR2 cluster-robust standard errors with Satterthwaite df, against dense and hand-made references.

References: an independent dense-matrix computation written here from Pustejovsky &
Tipton (2018, J Bus Econ Stat 36:672-683, section 2): ``A_j = D_jᵀ B_j^{-1/2} D_j`` with
``D_j`` the upper-triangular Cholesky factor of ``Φ_j`` (``D_jᵀ D_j = Φ_j``) and
``B_j = D_j [(I - H) Φ (I - H)ᵀ]_jj D_jᵀ``, ``H = X (XᵀWX)⁻¹ XᵀW``, the sandwich
``M Σ_j X_jᵀ W_j A_j e_j e_jᵀ A_jᵀ W_j X_j M`` and the Satterthwaite df of Tipton (2015,
Psychological Methods 20:375-393); the hand-made example of
tests/reference/cluster_robust.py; and statsmodels 0.15
``WLS(...).fit(cov_type="cluster")`` for the CR0 / CR1 sandwich.
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
    return pd.DataFrame({"cl": [f"c{j}" for j in cl], "x": x, "z": z, "es": y, "es_var": v})


def _dense_cr2(y, X, Phi, cl):
    """Dense CR2 covariance and Satterthwaite df, with k×k matrices throughout."""
    k, p = X.shape
    W = np.linalg.inv(Phi)
    M = np.linalg.inv(X.T @ W @ X)
    b = M @ X.T @ W @ y
    e = y - X @ b
    H = X @ M @ X.T @ W
    Om = (np.eye(k) - H) @ Phi @ (np.eye(k) - H).T
    groups = [np.flatnonzero(cl == g) for g in np.unique(cl)]
    WA = np.zeros((k, k))  # block diagonal: W_j A_j
    for r in groups:
        Dj = linalg.cholesky(Phi[np.ix_(r, r)], lower=False)  # upper triangular, Dᵀ D = Φ_j
        Bj = Dj @ Om[np.ix_(r, r)] @ Dj.T
        Aj = Dj.T @ np.real(linalg.inv(linalg.sqrtm(Bj))) @ Dj
        WA[np.ix_(r, r)] = W[np.ix_(r, r)] @ Aj
    V = np.zeros((p, p))
    for r in groups:
        u = X[r].T @ WA[np.ix_(r, r)] @ e[r]
        V += np.outer(u, u)
    V = M @ V @ M
    df = np.empty(p)
    for c in range(p):
        G = WA.T @ X @ M[:, c]  # stacked g_j = A_jᵀ W_j X_j M e_c
        E = sum(G[r] @ Om[np.ix_(r, r)] @ G[r] for r in groups)
        Var = 2 * sum((G[r] @ Om[np.ix_(r, s)] @ G[s]) ** 2 for r in groups for s in groups)
        df[c] = 2 * E**2 / Var
    return b, V, df


def test_cr2_hand_made_reference():
    # tests/reference/cluster_robust.py: values derived by hand (closed-form 2 × 2 roots)
    from reference.cluster_robust import CR2_HAND as ref

    df = pd.DataFrame({"y": ref["y"], "v": ref["v"], "cl": ref["cluster"]})
    m = MetaRegression(tau2=0.0, cluster="cl").fit(df, effect="y", variance="v")
    assert_allclose(m.coef_, [ref["estimate"]], rtol=1e-12)
    assert_allclose(m.se_, [ref["se"]], rtol=1e-10)
    assert_allclose(m.coefficients_["df"], [ref["df"]], rtol=1e-10)
    assert abs(m.se_[0] - ref["se_whitened_variant"]) > 1e-3  # not the whitened variant
    b, V, dfs = _dense_cr2(np.array(ref["y"]), np.ones((4, 1)), np.diag(ref["v"]),
                           np.array(ref["cluster"]))
    assert_allclose(np.sqrt(V[0, 0]), ref["se"], rtol=1e-10)  # the dense code agrees by hand
    assert_allclose(dfs, [ref["df"]], rtol=1e-10)


def test_cr2_adjustment_is_unbiased_under_the_working_model():
    # Pustejovsky & Tipton (2018): A_j (Φ - X M Xᵀ)_jj A_jᵀ = Φ_j when W = Φ⁻¹
    from envlink.metareg.inference import cr2_adjustment

    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(9), rng.normal(size=9)])
    phi = np.diag(rng.uniform(0.05, 2.0, 9))
    M = np.linalg.inv(X.T @ np.linalg.inv(phi) @ X)
    r = np.arange(4)
    A = cr2_adjustment(phi[np.ix_(r, r)], X[r], M)
    S = phi[np.ix_(r, r)] - X[r] @ M @ X[r].T
    assert_allclose(A @ S @ A.T, phi[np.ix_(r, r)], rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("method", ["REML", "DL"])
def test_cr2_independent_matches_dense(method):
    df = _data()
    m = MetaRegression(method=method, moderators="x + z", cluster="cl").fit(df, effect="es",
                                                                           variance="es_var")
    y = df["es"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"], df["z"]])
    Phi = np.diag(df["es_var"].to_numpy() + m.tau2_)
    b, V, dfs = _dense_cr2(y, X, Phi, df["cl"].to_numpy())
    assert_allclose(m.coef_, b, rtol=1e-10)
    assert_allclose(m.vcov_, V, rtol=1e-8, atol=1e-14)
    assert_allclose(m.coefficients_["df"], dfs, rtol=1e-8)
    d = m.to_dict()
    assert d["coefficients"]["test"] == "t" and d["coefficients"]["df"] == 11
    assert d["model"]["cluster"] == "cl" and d["model"]["cluster_count"] == 12
    assert_allclose([c["df"] for c in d["coefficients"]["table"]], dfs, rtol=1e-8)


def test_cr2_multilevel_matches_dense():
    df = _data(seed=5, J=15)
    df["study"] = df["cl"] + "_" + (np.arange(len(df)) % 2).astype(str)  # 2 studies per cluster
    m = MetaRegression(moderators="x", nested="study", cluster="cl").fit(df, effect="es",
                                                                        variance="es_var")
    s1, s2 = m.variance_components_.values()
    st = pd.factorize(df["study"])[0]
    Phi = np.diag(df["es_var"].to_numpy() + s2) + s1 * (st[:, None] == st[None, :])
    X = np.column_stack([np.ones(len(df)), df["x"]])
    b, V, dfs = _dense_cr2(df["es"].to_numpy(), X, Phi, df["cl"].to_numpy())
    assert_allclose(m.coef_, b, rtol=1e-8)
    assert_allclose(m.vcov_, V, rtol=1e-7, atol=1e-14)
    assert_allclose(m.coefficients_["df"], dfs, rtol=1e-7)


@pytest.mark.parametrize("kind,correction", [("CR0", False), ("CR1", True)])
def test_cr0_cr1_match_statsmodels(kind, correction):
    # statsmodels WLS cluster sandwich; use_correction=True is G/(G-1) (N-1)/(N-p)
    df = _data()
    m = MetaRegression(moderators="x + z").fit(df, effect="es", variance="es_var")
    y = df["es"].to_numpy()
    X = np.column_stack([np.ones(len(df)), df["x"], df["z"]])
    w = 1 / (df["es_var"].to_numpy() + m.tau2_)
    groups = pd.factorize(df["cl"])[0]
    ref = WLS(y, X, weights=w).fit(cov_type="cluster",
                                   cov_kwds={"groups": groups, "use_correction": correction})
    rows = [np.flatnonzero(groups == g) for g in range(groups.max() + 1)]
    rf = cluster_robust(X, y - X @ ref.params, [np.diag(1 / w[r]) for r in rows], rows, kind=kind)
    assert_allclose(rf.vcov, ref.cov_params(), rtol=1e-8)
