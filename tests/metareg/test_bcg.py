"""The BCG vaccine trials (Colditz et al. 1994, JAMA) against independent references.

References used here: statsmodels 0.15 (``stats.meta_analysis.combine_effects``,
``regression.linear_model.WLS``, ``stats.contingency_tables.Table2x2``), scipy
(independent maximisation of the (restricted) log-likelihood written below in dense
matrix form, and ``brentq`` for the Q-profile equations), and closed forms from the
cited papers.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference.bcg import table
from scipy import optimize, stats
from statsmodels.regression.linear_model import WLS
from statsmodels.stats.contingency_tables import Table2x2
from statsmodels.stats.meta_analysis import combine_effects

from envlink.metareg import MetaRegression


@pytest.fixture(scope="module")
def bcg():
    return table()


def _design(df, mods):
    X = np.ones((len(df), 1))
    if mods:
        X = np.column_stack([X, df["latitude_abs"].to_numpy(float)])
    return df["es"].to_numpy(float), df["es_var"].to_numpy(float), X


def _neg_loglik(t2, y, v, X, reml):
    """Dense (restricted) log-likelihood, written independently of envlink."""
    V = np.diag(v + t2)
    Vi = np.linalg.inv(V)
    XtViX = X.T @ Vi @ X
    b = np.linalg.solve(XtViX, X.T @ Vi @ y)
    r = y - X @ b
    ll = -0.5 * (np.linalg.slogdet(V)[1] + r @ Vi @ r)
    if reml:
        ll -= 0.5 * np.linalg.slogdet(XtViX)[1]
    return -ll


def _scipy_tau2(y, v, X, reml):
    res = optimize.minimize_scalar(_neg_loglik, bounds=(0.0, 5.0), method="bounded",
                                   args=(y, v, X, reml), options={"xatol": 1e-13})
    return res.x


def test_log_risk_ratios_match_statsmodels(bcg):
    # statsmodels Table2x2 log risk ratio and its standard error (Katz log method)
    for row in bcg.itertuples():
        t = Table2x2(np.array([[row.vacc_tb, row.vacc_ok], [row.ctrl_tb, row.ctrl_ok]], dtype=float))
        assert_allclose(row.es, t.log_riskratio, rtol=1e-12)
        assert_allclose(row.es_var, t.log_riskratio_se**2, rtol=1e-12)


@pytest.mark.parametrize("method", ["REML", "ML"])
@pytest.mark.parametrize("mods", [None, "latitude_abs"])
def test_likelihood_fits_match_scipy(bcg, method, mods):
    y, v, X = _design(bcg, mods)
    ref = _scipy_tau2(y, v, X, reml=(method == "REML"))
    m = MetaRegression(method=method, moderators=mods).fit(bcg, effect="es", variance="es_var")
    assert m.converged_
    assert_allclose(m.tau2_, ref, rtol=1e-5)  # iterative fits: 1e-5 (issue 5)
    W = np.diag(1 / (v + ref))
    b = np.linalg.solve(X.T @ W @ X, X.T @ W @ y)
    assert_allclose(m.coef_, b, rtol=1e-5)


@pytest.mark.parametrize("method", ["DL", "PM"])
def test_intercept_only_matches_statsmodels(bcg, method):
    # statsmodels.stats.meta_analysis.combine_effects, method_re="dl" / "pm"
    kw = {"atol": 1e-14, "maxiter": 500} if method == "PM" else {}
    ref = combine_effects(bcg["es"].to_numpy(), bcg["es_var"].to_numpy(), method_re=method.lower(), **kw)
    m = MetaRegression(method=method).fit(bcg, effect="es", variance="es_var")
    rtol = 1e-6 if method == "DL" else 1e-5  # closed form / iterative
    assert_allclose(m.tau2_, ref.tau2, rtol=rtol)
    assert_allclose(m.coef_[0], ref.mean_effect_re, rtol=rtol)
    assert_allclose(m.se_[0], ref.sd_eff_w_re, rtol=rtol)
    assert_allclose(m.Q_E_, ref.q, rtol=1e-10)
    kh = MetaRegression(method=method, test="knapp-hartung").fit(bcg, effect="es", variance="es_var")
    assert_allclose(kh.se_[0], ref.sd_eff_w_re_hksj, rtol=rtol)


@pytest.mark.parametrize("method", ["REML", "DL", "PM", "HE", "SJ"])
def test_coefficients_match_wls_at_tau2(bcg, method):
    # statsmodels WLS at the fitted tau²: z SEs = WLS with scale fixed at 1,
    # Knapp-Hartung SEs = WLS with the scale estimated (Knapp & Hartung 2003)
    y, v, X = _design(bcg, "latitude_abs")
    z = MetaRegression(method=method, moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    kh = MetaRegression(method=method, moderators="latitude_abs", test="knapp-hartung").fit(
        bcg, effect="es", variance="es_var")
    w = 1 / (v + z.tau2_)
    fixed = WLS(y, X, weights=w).fit(cov_type="fixed scale")
    est = WLS(y, X, weights=w).fit()
    assert_allclose(z.coef_, fixed.params, rtol=1e-8)
    assert_allclose(z.se_, fixed.bse, rtol=1e-8)
    assert_allclose(kh.se_, est.bse, rtol=1e-8)
    assert_allclose(kh.coefficients_["p"], est.pvalues, rtol=1e-8)
    assert_allclose(kh.Q_M_, est.fvalue, rtol=1e-8)
    assert_allclose(z.Q_M_, (fixed.params[1] / fixed.bse[1]) ** 2, rtol=1e-8)


def test_closed_forms_intercept_only(bcg):
    y, v = bcg["es"].to_numpy(), bcg["es_var"].to_numpy()
    k = len(y)
    w = 1 / v
    mu = (w @ y) / w.sum()
    Q = w @ (y - mu) ** 2  # Cochran's Q (Hedges & Olkin 1985)
    dl = (Q - (k - 1)) / (w.sum() - (w**2).sum() / w.sum())  # DerSimonian & Laird 1986
    he = np.sum((y - y.mean()) ** 2) / (k - 1) - v.mean()  # Hedges 1983
    t0 = np.mean((y - y.mean()) ** 2)  # Sidik & Jonkman 2005
    q = 1 / (v / t0 + 1)
    mq = (q @ y) / q.sum()
    sj = np.sum(q * (y - mq) ** 2) / (k - 1)
    for method, ref in [("DL", dl), ("HE", he), ("SJ", sj)]:
        m = MetaRegression(method=method).fit(bcg, effect="es", variance="es_var")
        assert_allclose(m.tau2_, ref, rtol=1e-6)
    m = MetaRegression(method="DL").fit(bcg, effect="es", variance="es_var")
    assert_allclose(m.Q_E_, Q, rtol=1e-10)
    assert_allclose(m.Q_E_p_, stats.chi2.sf(Q, k - 1), rtol=1e-10)
    # with tau² = DL the mixed-model I² equals Higgins & Thompson's (Q - df) / Q
    assert_allclose(m.I2_, 100 * (Q - (k - 1)) / Q, rtol=1e-6)
    assert_allclose(m.H2_, Q / (k - 1), rtol=1e-6)


def test_fixed_tau2_and_fixed_effect(bcg):
    y, v, X = _design(bcg, "latitude_abs")
    m = MetaRegression(tau2=0.0, moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    ref = WLS(y, X, weights=1 / v).fit(cov_type="fixed scale")  # statsmodels WLS
    assert m.method_ == "fixed"
    assert_allclose(m.coef_, ref.params, rtol=1e-8)
    assert_allclose(m.se_, ref.bse, rtol=1e-8)


@pytest.mark.parametrize("mods", [None, "latitude_abs"])
def test_q_profile_ci_matches_brentq(bcg, mods):
    # Viechtbauer 2007: Q(tau²) = chi²_{k-p, 0.975} (lower), chi²_{k-p, 0.025} (upper)
    y, v, X = _design(bcg, mods)
    k, p = X.shape

    def Q(t2):
        W = np.diag(1 / (v + t2))
        b = np.linalg.solve(X.T @ W @ X, X.T @ W @ y)
        r = y - X @ b
        return r @ W @ r

    lo = optimize.brentq(lambda t: Q(t) - stats.chi2.ppf(0.975, k - p), 0, 10, xtol=1e-14)
    hi = optimize.brentq(lambda t: Q(t) - stats.chi2.ppf(0.025, k - p), 0, 10, xtol=1e-14)
    m = MetaRegression(moderators=mods).fit(bcg, effect="es", variance="es_var")
    assert_allclose(m.tau2_ci_, (lo, hi), rtol=1e-6)


def test_r2_and_prediction_interval(bcg):
    full = MetaRegression(moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    base = MetaRegression().fit(bcg, effect="es", variance="es_var")
    # pseudo-R² (Raudenbush 2009): relative reduction of tau²
    assert_allclose(full.R2_, 100 * (base.tau2_ - full.tau2_) / base.tau2_, rtol=1e-12)
    pr = base.predict()
    z = stats.norm.ppf(0.975)
    # Riley, Higgins & Deeks 2011: mu ± q sqrt(se² + tau²); z quantile under test="z"
    assert_allclose(pr["pi_high"].iloc[0], base.coef_[0] + z * np.sqrt(base.se_[0] ** 2 + base.tau2_),
                    rtol=1e-12)
    kh = MetaRegression(test="knapp-hartung").fit(bcg, effect="es", variance="es_var")
    t = stats.t.ppf(0.975, 12)
    pk = kh.predict()
    assert_allclose(pk["pi_low"].iloc[0], kh.coef_[0] - t * np.sqrt(kh.se_[0] ** 2 + kh.tau2_),
                    rtol=1e-12)
    new = full.predict(bcg.iloc[[0]].assign(latitude_abs=20.0))
    assert_allclose(new["estimate"].iloc[0], full.coef_[0] + 20 * full.coef_[1], rtol=1e-12)


@pytest.mark.parametrize("mods", [None, "latitude_abs"])
def test_knapp_hartung_truncation(bcg, mods):
    # Knapp & Hartung (2003) scale q = y'Py / (k - p); truncated form q* = max(1, q)
    y, v, X = _design(bcg, mods)
    z = MetaRegression(moderators=mods).fit(bcg, effect="es", variance="es_var")
    W = np.diag(1 / (v + z.tau2_))
    b = np.linalg.solve(X.T @ W @ X, X.T @ W @ y)
    q = (y - X @ b) @ W @ (y - X @ b) / (len(y) - X.shape[1])
    tr = MetaRegression(moderators=mods, test="knapp-hartung", truncate_kh=True).fit(
        bcg, effect="es", variance="es_var")
    assert_allclose(tr.kh_scale_, max(1.0, q), rtol=1e-10)
    assert_allclose(tr.se_, z.se_ * np.sqrt(max(1.0, q)), rtol=1e-10)


def test_moment_estimators_with_moderator_dense(bcg):
    # meta-regression forms written densely: DerSimonian & Laird 1986 (via tr P0),
    # Hedges 1983 (OLS residuals), Sidik & Jonkman 2005, Paule & Mandel 1982 (brentq)
    y, v, X = _design(bcg, "latitude_abs")
    k, p = X.shape

    def P(t2):
        W = np.diag(1 / (v + t2))
        return W - W @ X @ np.linalg.inv(X.T @ W @ X) @ X.T @ W

    Q0 = y @ P(0) @ y
    dl = max(0.0, (Q0 - (k - p)) / np.trace(P(0)))
    H = X @ np.linalg.inv(X.T @ X) @ X.T
    e = y - H @ y
    he = max(0.0, (e @ e - np.trace((np.eye(k) - H) @ np.diag(v))) / (k - p))
    t0 = e @ e / k
    sj = t0 * (y @ P(t0) @ y) / (k - p)
    pm = optimize.brentq(lambda t: y @ P(t) @ y - (k - p), 0, 10, xtol=1e-15)
    for method, ref, rtol in [("DL", dl, 1e-6), ("HE", he, 1e-6), ("SJ", sj, 1e-6),
                              ("PM", pm, 1e-5)]:
        m = MetaRegression(method=method, moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
        assert_allclose(m.tau2_, ref, rtol=rtol)
