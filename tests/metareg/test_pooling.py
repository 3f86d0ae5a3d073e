"""Rubin's rules against hand computations.

Sources: Little & Rubin (2002), Statistical Analysis with Missing Data, 2nd ed.,
section 5.4 (pooled estimate, within/between/total variance, ν_old and γ); Barnard &
Rubin (1999), Biometrika 86:948-955 (ν_obs and the combined df). Every expected value
below is worked by hand from those formulas in the comments.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from envlink.errors import InputError, ModelError
from envlink.metareg.pooling import rubin_pool


def test_rubin_rules_hand_computation_z():
    # Q = 1, 2, 3, 6 ; U = 0.5, 0.7, 0.6, 0.2 (M = 4)
    r = rubin_pool([[1.0], [2.0], [3.0], [6.0]], [[0.5], [0.7], [0.6], [0.2]], terms=["x"])
    row = r.table.iloc[0]
    qbar, ubar = 3.0, 0.5                       # means
    b = (4 + 1 + 0 + 9) / 3                     # Σ(Q - Q̄)² / (M - 1) = 14/3
    t = ubar + (1 + 1 / 4) * b                  # 0.5 + 1.25 * 14/3
    lam = 1.25 * b / t
    riv = 1.25 * b / ubar
    nu = 3 / lam**2                             # ν_old, complete-data z test
    gamma = (riv + 2 / (nu + 3)) / (riv + 1)
    assert_allclose([row["estimate"], row["within"], row["between"], row["total"]],
                    [qbar, ubar, b, t], rtol=1e-14)
    assert_allclose([row["riv"], row["lambda"], row["df"], row["fmi"]], [riv, lam, nu, gamma],
                    rtol=1e-13)
    assert_allclose(row["se_growth"], np.sqrt(t / ubar), rtol=1e-14)
    from scipy import stats
    assert_allclose(row["p"], 2 * stats.t.sf(qbar / np.sqrt(t), nu), rtol=1e-10)
    assert_allclose(row["ci_high"] - row["estimate"], stats.t.ppf(0.975, nu) * np.sqrt(t),
                    rtol=1e-10)


def test_barnard_rubin_df_with_complete_data_df():
    # the same draws with a complete-data t test on 10 df
    r = rubin_pool([[1.0], [2.0], [3.0], [6.0]], [[0.5], [0.7], [0.6], [0.2]], df_complete=10)
    row = r.table.iloc[0]
    b = 14 / 3
    t = 0.5 + 1.25 * b
    lam = 1.25 * b / t
    nu_old = 3 / lam**2
    nu_obs = (10 + 1) / (10 + 3) * 10 * (1 - lam)
    assert_allclose(row["df"], nu_old * nu_obs / (nu_old + nu_obs), rtol=1e-13)
    assert row["df"] < min(nu_old, 10)


def test_no_between_variance_means_no_growth():
    r = rubin_pool([[0.4, 1.0], [0.4, 1.0], [0.4, 1.0]], [[0.01, 0.04]] * 3, terms=["a", "b"])
    assert_allclose(r.table["se_growth"], [1.0, 1.0], rtol=1e-12)
    # B = 0 (to rounding): ν_old is infinite (or astronomically large) and γ = 0
    assert_allclose(r.table["fmi"], [0.0, 0.0], atol=1e-12)
    assert (r.table["df"] > 1e12).all()
    assert list(r.table["term"]) == ["a", "b"]


def test_pooling_errors():
    with pytest.raises(ModelError, match="at least 2"):
        rubin_pool([[1.0]], [[0.1]])
    with pytest.raises(InputError, match="one shape"):
        rubin_pool([[1.0], [2.0]], [[0.1]])
    with pytest.raises(ModelError, match="finite"):
        rubin_pool([[1.0], [np.nan]], [[0.1], [0.1]])
