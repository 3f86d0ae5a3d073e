"""Knapp-Hartung coverage by simulation, and the permutation test against exact enumeration.

Coverage: 2000 seeded replications at k = 10. If the true coverage is 95 %, the
observed proportion has standard error sqrt(0.95 * 0.05 / 2000) = 0.49 %, so the
band 93-97 % is about ±4 standard errors (a false alarm probability near 6e-5);
Knapp & Hartung (2003) and later simulations report near-nominal coverage for their
intervals with moment or REML tau² (common practice: the band of the issue).

Permutation: Higgins & Thompson (2004) permute moderator rows; for k = 7 every one
of the 5040 permutations is enumerated here with an independent NumPy DL + WLS fit,
and envlink's seeded Monte Carlo p must lie within 4 binomial standard errors of it.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference.bcg import table

from envlink.metareg import MetaRegression


@pytest.mark.parametrize("method", ["DL", "REML"])
def test_knapp_hartung_coverage_k10(method):
    rng = np.random.default_rng(20260)
    reps, k = 2000, 10
    beta = np.array([0.2, 0.1])
    hit = np.zeros(2)
    for _ in range(reps):
        x = rng.normal(size=k)
        v = rng.uniform(0.01, 0.1, k)
        y = beta[0] + beta[1] * x + rng.normal(0, np.sqrt(0.05), k) + rng.normal(0, np.sqrt(v))
        m = MetaRegression(method=method, test="knapp-hartung").fit(y=y, v=v, X=x[:, None])
        c = m.coefficients_
        hit += (c["ci_low"].to_numpy() <= beta) & (beta <= c["ci_high"].to_numpy())
    cover = hit / reps
    assert np.all((cover >= 0.93) & (cover <= 0.97)), cover


def _dl_wls_stat(y, v, X):
    """Independent DL tau² and z statistic of the slope (DerSimonian & Laird 1986)."""
    w = 1 / v
    XtW = X.T * w
    b = np.linalg.solve(XtW @ X, XtW @ y)
    Q = np.sum(w * (y - X @ b) ** 2)
    P = np.diag(w) - XtW.T @ np.linalg.solve(XtW @ X, XtW)
    t2 = max(0.0, (Q - (len(y) - X.shape[1])) / np.trace(P))
    w = 1 / (v + t2)
    XtW = X.T * w
    V = np.linalg.inv(XtW @ X)
    b = V @ XtW @ y
    return b[1] / np.sqrt(V[1, 1])


def test_permutation_p_matches_exact_enumeration():
    df = table().iloc[:7]
    y, v = df["es"].to_numpy(), df["es_var"].to_numpy()
    x = df["latitude_abs"].to_numpy(float)
    obs = abs(_dl_wls_stat(y, v, np.column_stack([np.ones(7), x])))
    perms = list(itertools.permutations(range(7)))
    ge = sum(abs(_dl_wls_stat(y, v, np.column_stack([np.ones(7), x[list(p)]]))) >= obs - 1e-12
             for p in perms)
    exact = ge / len(perms)
    m = MetaRegression(method="DL", moderators="latitude_abs").fit(df, effect="es", variance="es_var")
    n = 2000
    res = m.permutation_test(n_permutations=n, seed=7, progress=False)
    se = np.sqrt(exact * (1 - exact) / n)
    assert abs(res.terms["p"].iloc[0] - exact) <= 4 * se + 1 / n
    # with one moderator the z test and Q_M = z² order permutations identically
    assert_allclose(res.Q_M_p, res.terms["p"].iloc[0], rtol=1e-12)


def test_permutation_reproducible_with_seed():
    df = table()
    m = MetaRegression(moderators="latitude_abs + year").fit(df, effect="es", variance="es_var")
    a = m.permutation_test(n_permutations=200, seed=42, progress=False)
    b = m.permutation_test(n_permutations=200, seed=42, progress=False)
    assert a.to_dict() == b.to_dict()
    assert list(a.terms["term"]) == ["latitude_abs", "year"]
    assert 0 < a.Q_M_p <= 1
