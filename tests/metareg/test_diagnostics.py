"""Egger's test, trim-and-fill and fail-safe N against statsmodels, scipy and hand computation."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from reference.diagnostics import (
    ASYMMETRIC_FUNNEL,
    TRIMFILL_L0_HAND,
    TRIMFILL_R0_HAND,
    Z_ONE_TAILED_05,
)
from scipy import optimize, stats
from statsmodels.stats.meta_analysis import combine_effects

import envlink
from envlink.errors import InputError, ModelError
from envlink.metareg import diagnostics as dg

Y = np.array(ASYMMETRIC_FUNNEL["y"])
V = np.array(ASYMMETRIC_FUNNEL["v"])

# ---------------------------------------------------------------- Egger


def test_egger_matches_statsmodels_ols() -> None:
    se = np.sqrt(V)
    # Egger et al. 1997: OLS of y/se on 1/se, an independent statsmodels fit
    ols = sm.OLS(Y / se, sm.add_constant(1 / se)).fit()
    res = envlink.egger_test(Y, V)
    assert_allclose(res.intercept, ols.params[0], rtol=1e-10)
    assert_allclose(res.intercept_se, ols.bse[0], rtol=1e-10)
    assert_allclose(res.statistic, ols.tvalues[0], rtol=1e-10)
    assert_allclose(res.p_value, ols.pvalues[0], rtol=1e-8)
    assert_allclose(res.slope, ols.params[1], rtol=1e-10)
    assert_allclose(res.slope_se, ols.bse[1], rtol=1e-10)
    assert res.df == len(Y) - 2 and res.k == len(Y)
    assert res.intercept > 0 and res.p_value < 0.05  # the invented funnel is asymmetric
    # funnel-plot line: fitted y/se times se
    assert_allclose(res.funnel_line(se), ols.fittedvalues * se, rtol=1e-10)


def test_egger_equals_weighted_regression_of_y_on_se() -> None:
    se = np.sqrt(V)
    # the equivalent form: WLS of y on se with weights 1/v; the slope is Egger's intercept
    wls = sm.WLS(Y, sm.add_constant(se), weights=1 / V).fit()
    res = dg.egger_test(Y, V)
    assert_allclose(res.intercept, wls.params[1], rtol=1e-10)
    assert_allclose(res.intercept_se, wls.bse[1], rtol=1e-10)
    assert_allclose(res.slope, wls.params[0], rtol=1e-10)
    assert_allclose(res.p_value, wls.pvalues[1], rtol=1e-8)
    assert set(res.to_dict()) >= {"intercept", "intercept_se", "statistic", "df", "p_value"}


def test_egger_bad_input() -> None:
    with pytest.raises(ModelError, match="at least 3 effects; got 2"):
        dg.egger_test([0.1, 0.2], [0.1, 0.2])
    with pytest.raises(ModelError, match="all variances are equal"):
        dg.egger_test([0.1, 0.2, 0.4], [0.1, 0.1, 0.1])
    with pytest.raises(InputError, match=r"variance v\[2\] is -0.1"):
        dg.egger_test([0.1, 0.2, 0.4], [0.1, 0.2, -0.1])
    with pytest.raises(InputError, match=r"effect y\[0\] is nan"):
        dg.egger_test([np.nan, 0.2, 0.4], [0.1, 0.2, 0.3])
    with pytest.raises(InputError, match="y has 3 values but v has 2"):
        dg.egger_test([0.1, 0.2, 0.4], [0.1, 0.2])


# ---------------------------------------------------------------- random-effects pooling


def test_private_pool_dl_matches_statsmodels_and_reml_matches_scipy() -> None:
    mu, se, tau2 = dg._pool(Y, V, "DL")
    ref = combine_effects(Y, V, method_re="chi2")  # statsmodels: DerSimonian-Laird
    assert ref.tau2 > 0  # statsmodels does not truncate at 0; this set needs no truncation
    assert_allclose([mu, se, tau2], [ref.mean_effect_re, ref.sd_eff_w_re, ref.tau2], rtol=1e-10)

    def neg_restricted_loglik(t2: float) -> float:  # REML, intercept only (written here)
        w = 1 / (V + t2)
        m = (w * Y).sum() / w.sum()
        return 0.5 * (np.log(V + t2).sum() + math.log(w.sum()) + (w * (Y - m) ** 2).sum())

    opt = optimize.minimize_scalar(neg_restricted_loglik, bounds=(0, 1), method="bounded",
                                   options={"xatol": 1e-12})  # fmt: skip
    mu_r, se_r, tau2_r = dg._pool(Y, V, "REML")
    w = 1 / (V + opt.x)
    assert_allclose(tau2_r, opt.x, rtol=1e-5)
    assert_allclose(mu_r, (w * Y).sum() / w.sum(), rtol=1e-6)
    assert_allclose(se_r, math.sqrt(1 / w.sum()), rtol=1e-5)


# ---------------------------------------------------------------- trim and fill


def test_trim_and_fill_l0_worked_by_hand() -> None:
    ref = TRIMFILL_L0_HAND
    y, k = ref["y"], len(ref["y"])
    # re-derive the steps of tests/reference/diagnostics.py in plain Python
    k0, path = 0, []
    for _ in range(10):
        kept = sorted(y)[: k - k0]
        mu = sum(kept) / len(kept)
        dev = [es - mu for es in y]
        order = sorted(range(k), key=lambda i: abs(dev[i]))
        rank = {i: r + 1 for r, i in enumerate(order)}  # no ties in this set
        t_n = sum(rank[i] for i in range(k) if dev[i] > 0)
        l0 = (4 * t_n - k * (k + 1)) / (2 * k - 1)
        path.append(l0)
        new = max(0, math.floor(l0 + 0.5))
        if new == k0:
            break
        k0 = new
    assert_allclose(path, ref["l0_path"], rtol=1e-12)
    assert k0 == ref["k0"] and math.isclose(mu, ref["center"], rel_tol=1e-12)

    res = envlink.trim_and_fill(y, ref["v"], side="left")
    assert res.k0 == ref["k0"] and res.k == k and res.side == "left" and res.converged
    assert res.iterations == ref["iterations"]
    assert_allclose(res.statistic, ref["l0_path"][-1], rtol=1e-12)
    assert_allclose(res.center, ref["center"], rtol=1e-12)
    assert_allclose(res.y[res.filled], ref["filled"], rtol=1e-12)
    assert_allclose(res.y[~res.filled], y, rtol=0, atol=0)
    assert_allclose(res.v, [1.0] * (k + res.k0), rtol=0)
    assert_allclose([res.estimate, res.se, res.tau2], [ref["estimate"], ref["se"], 0.0], rtol=1e-12, atol=1e-15)
    q = sum((es - ref["estimate"]) ** 2 for es in res.y)
    assert_allclose(q, ref["q_filled"], rtol=1e-10)  # below k - 1 = 8: DL tau² = 0
    assert_allclose(res.estimate_unadjusted, sum(y) / k, rtol=1e-12)
    z = stats.norm.isf(0.025)
    assert_allclose([res.ci_low, res.ci_high], [1.12 - z / 3, 1.12 + z / 3], rtol=1e-12)
    assert len(res.to_dict()["y"]) == k + 2


def test_trim_and_fill_right_side_mirrors_left() -> None:
    ref = TRIMFILL_L0_HAND
    left = dg.trim_and_fill(ref["y"], ref["v"], side="left")
    right = dg.trim_and_fill([-es for es in ref["y"]], ref["v"], side="right")
    assert right.k0 == left.k0 and right.side == "right"
    assert_allclose(right.y, -left.y, rtol=1e-12)
    assert_allclose([right.estimate, right.center], [-left.estimate, -left.center], rtol=1e-12)


def test_trim_and_fill_r0_worked_by_hand() -> None:
    ref = TRIMFILL_R0_HAND
    res = dg.trim_and_fill(ref["y"], ref["v"], side="left", estimator="R0")
    assert res.k0 == ref["k0"] and res.estimator == "R0"
    assert_allclose(res.center, ref["center"], rtol=1e-12)
    assert_allclose(res.y[res.filled], ref["filled"], rtol=1e-12)


@pytest.mark.parametrize("estimator", ["L0", "R0"])
@pytest.mark.parametrize("tau2_method", ["DL", "REML"])
def test_symmetric_set_gives_k0_zero(estimator: str, tau2_method: str) -> None:
    # a funnel symmetric about 0.3 (pairs with equal variance): Duval & Tweedie's k0 = 0
    d = np.array([0.05, 0.1, 0.2, 0.35, 0.5])
    v = np.array([0.01, 0.02, 0.05, 0.1, 0.2])
    y = np.concatenate([0.3 - d, 0.3 + d])
    res = dg.trim_and_fill(y, np.concatenate([v, v]), estimator=estimator, tau2_method=tau2_method)  # type: ignore[arg-type]
    assert res.k0 == 0 and not res.filled.any()
    assert_allclose(res.estimate, 0.3, rtol=1e-12)
    assert_allclose(res.estimate, res.estimate_unadjusted, rtol=1e-15)


def test_trim_and_fill_side_from_egger_and_reml_pooling() -> None:
    res = dg.trim_and_fill(Y, V, tau2_method="REML")
    assert res.side == "left"  # Egger's intercept > 0: small studies show larger effects
    assert res.k0 >= 1 and res.estimate < res.estimate_unadjusted
    mu, se, tau2 = dg._pool(res.y, res.v, "REML")
    assert_allclose([res.estimate, res.se, res.tau2], [mu, se, tau2], rtol=1e-12)
    assert_allclose(res.y[res.filled], 2 * res.center - np.sort(Y)[len(Y) - res.k0 :], rtol=1e-12)


def test_trim_and_fill_non_convergence_warns() -> None:
    ref = TRIMFILL_L0_HAND
    with pytest.warns(dg.DiagnosticWarning, match="did not settle on k0 within 1 iterations"):
        res = dg.trim_and_fill(ref["y"], ref["v"], side="left", max_iter=1)
    assert not res.converged and res.k0 == 1


def test_trim_and_fill_bad_options() -> None:
    with pytest.raises(InputError, match="'side' parameter of trim_and_fill"):
        dg.trim_and_fill(Y, V, side="up")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="'estimator' parameter"):
        dg.trim_and_fill(Y, V, estimator="Q0")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="'tau2_method' parameter"):
        dg.trim_and_fill(Y, V, tau2_method="PM")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="pass side='left' or side='right'"):
        dg.trim_and_fill([0.1, 0.5, 0.9], [1, 1, 1])
    with pytest.raises(ModelError, match="at least 3"):
        dg.trim_and_fill([0.1, 0.5], [1, 2], side="left")


# ---------------------------------------------------------------- fail-safe N


def test_fail_safe_n_closed_form_by_hand() -> None:
    assert math.isclose(stats.norm.isf(0.05), Z_ONE_TAILED_05, rel_tol=1e-15)
    z = Y / np.sqrt(V)
    # Rosenthal 1979: N = (sum z)^2 / z_alpha^2 - k, rounded up to a whole study
    hand = math.ceil(z.sum() ** 2 / Z_ONE_TAILED_05**2 - len(Y))
    n = envlink.fail_safe_n(Y, V)
    assert n == hand and isinstance(n, int)
    # Stouffer's combined z with N null studies is no longer significant, with N - 1 it is
    assert z.sum() / math.sqrt(len(Y) + n) <= Z_ONE_TAILED_05
    assert z.sum() / math.sqrt(len(Y) + n - 1) > Z_ONE_TAILED_05
    assert dg.fail_safe_n(-Y, V) == n  # direction from the sum
    hand_01 = math.ceil(z.sum() ** 2 / stats.norm.isf(0.01) ** 2 - len(Y))
    assert dg.fail_safe_n(Y, V, alpha=0.01) == hand_01 < n


def test_fail_safe_n_not_significant_and_bad_input() -> None:
    assert dg.fail_safe_n([0.1, -0.05, 0.02], [0.1, 0.1, 0.1]) == 0
    with pytest.raises(InputError, match="'alpha' parameter of fail_safe_n"):
        dg.fail_safe_n(Y, V, alpha=1.5)
    with pytest.raises(InputError, match=r"variance v\[0\] is 0.0"):
        dg.fail_safe_n([0.1], [0.0])


def _dl_mean_statsmodels(y: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    # statsmodels' DerSimonian-Laird tau², truncated at 0 (statsmodels does not truncate)
    t2 = max(0.0, float(combine_effects(y, v, method_re="chi2").tau2))
    w = 1 / (v + t2)
    return float((w * y).sum() / w.sum()), math.sqrt(1 / w.sum())


def test_trim_and_fill_unequal_variances_against_statsmodels_pooling() -> None:
    # Duval & Tweedie's loop written out here, with statsmodels' DL pooling and scipy ranks
    k, k0 = len(Y), 0
    order = np.argsort(Y)
    for _ in range(100):
        mu, _ = _dl_mean_statsmodels(Y[order[: k - k0]], V[order[: k - k0]])
        dev = Y - mu
        t_n = stats.rankdata(np.abs(dev))[dev > 0].sum()
        new = max(0, math.floor((4 * t_n - k * (k + 1)) / (2 * k - 1) + 0.5))
        if new == k0:
            break
        k0 = new
    trimmed = order[k - k0 :]
    est, se = _dl_mean_statsmodels(np.r_[Y, 2 * mu - Y[trimmed]], np.r_[V, V[trimmed]])
    res = dg.trim_and_fill(Y, V, side="left")
    assert res.k0 == k0 > 0
    assert_allclose([res.center, res.estimate, res.se], [mu, est, se], rtol=1e-10)
