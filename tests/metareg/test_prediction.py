"""Prediction intervals (Riley, Higgins & Deeks 2011, BMJ 342:d549) and the notes on I².

Reference: the interval's formula, ``μ̂ ± t_{k-2} sqrt(se(μ̂)² + τ̂²)`` (Riley et al.
2011, "Prediction interval" box), with μ̂, se and τ̂² from statsmodels 0.15
``combine_effects(..., method_re="dl")`` on the BCG trials (Colditz et al. 1994).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference.bcg import table
from scipy import stats
from statsmodels.stats.meta_analysis import combine_effects

from envlink.errors import InputError, ModelError
from envlink.metareg import MetaRegression


def _statsmodels_dl():
    t = table()
    res = combine_effects(t["es"].to_numpy(), t["es_var"].to_numpy(), method_re="dl")
    return t, float(res.mean_effect_re), float(res.sd_eff_w_re), float(res.tau2)


def test_riley_interval_matches_its_formula():
    t, mu, se, tau2 = _statsmodels_dl()
    k = len(t)
    m = MetaRegression(method="DL").fit(t, effect="es", variance="es_var")
    got = m.predict(prediction="riley").iloc[0]
    half = stats.t.ppf(0.975, k - 2) * np.sqrt(se**2 + tau2)
    assert_allclose(got["estimate"], mu, rtol=1e-10)
    assert_allclose([got["pi_low"], got["pi_high"]], [mu - half, mu + half], rtol=1e-10)
    # the confidence interval keeps the tests' distribution (normal under z tests)
    zq = stats.norm.ppf(0.975)
    assert_allclose([got["ci_low"], got["ci_high"]], [mu - zq * se, mu + zq * se], rtol=1e-10)


def test_default_interval_uses_the_tests_distribution():
    t, mu, se, tau2 = _statsmodels_dl()
    z = MetaRegression(method="DL").fit(t, effect="es", variance="es_var").predict().iloc[0]
    half = stats.norm.ppf(0.975) * np.sqrt(se**2 + tau2)
    assert_allclose([z["pi_low"], z["pi_high"]], [mu - half, mu + half], rtol=1e-10)
    kh = MetaRegression(method="DL", test="knapp-hartung").fit(t, effect="es", variance="es_var")
    got = kh.predict().iloc[0]
    half = stats.t.ppf(0.975, len(t) - 1) * np.sqrt(got["se"] ** 2 + tau2)
    assert_allclose([got["pi_low"], got["pi_high"]], [mu - half, mu + half], rtol=1e-10)


def test_riley_with_moderators_uses_k_minus_p_minus_1():
    t = table()
    m = MetaRegression(method="DL", moderators="latitude_abs").fit(t, effect="es", variance="es_var")
    got = m.predict(t.iloc[:2], prediction="Riley")
    half = stats.t.ppf(0.975, len(t) - 3) * np.sqrt(got["se"] ** 2 + m.tau2_)
    assert_allclose(got["pi_high"] - got["estimate"], half, rtol=1e-10)


def test_prediction_rule_is_checked():
    t = table()
    m = MetaRegression().fit(t.iloc[:2], effect="es", variance="es_var")
    with pytest.raises(InputError, match="Did you mean 'riley'"):
        m.predict(prediction="rilye")
    with pytest.raises(ModelError, match="needs at least 1 df"):
        m.predict(prediction="riley")  # k = 2, p = 1: k - p - 1 = 0


def test_note_when_I2_is_zero_by_construction():
    t = table()
    m = MetaRegression(tau2=0.0).fit(t, effect="es", variance="es_var")
    assert m.I2_ == 0.0 and any("by construction" in n for n in m.notes_)
    m = MetaRegression(tau2=0.1).fit(t, effect="es", variance="es_var")
    assert not any("by construction" in n for n in m.notes_)


def test_note_when_a_component_is_zero_with_few_multi_row_groups():
    t = table()
    t["study"] = [f"s{i // 2}" for i in range(13)]  # 6 studies with two trials, one with one
    m = MetaRegression(moderators="latitude_abs", nested="study").fit(t, effect="es", variance="es_var")
    assert m.variance_components_["between_study"] == 0.0  # Colditz data: all within pairs
    assert any("between_study is estimated at 0" in n and "only 6 of 7" in n for n in m.notes_)
