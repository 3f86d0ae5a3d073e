"""Small-study checks that keep the model: the Egger-type test against statsmodels WLS.

Source: statsmodels (WLS) with the precision column ``sqrt(v)`` added to the model's
design and weights ``1 / (v + tau²)`` at the extended model's tau²: its coefficients
and standard errors equal the meta-regression's under the Knapp-Hartung scale
(q = y'Py / (k - p) is WLS's residual scale) — Egger et al. (1997) in its
meta-regression form. Fail-safe N: Rosenthal (1979) as in test_diagnostics.py.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import statsmodels.api as sm
from numpy.testing import assert_allclose

from envlink.metareg import MetaRegression
from envlink.metareg.bias import PRECISION_TERM, bias_checks, small_study_test
from envlink.metareg.diagnostics import fail_safe_n


def _table(seed: int = 0, k: int = 30) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    v = rng.uniform(0.005, 0.09, k)
    x = rng.normal(size=k)
    y = 0.2 + 0.3 * x + 0.8 * np.sqrt(v) + rng.normal(0, 0.1, k) + rng.normal(0, np.sqrt(v))
    return pd.DataFrame({"y": y, "v": v, "x": x, "study": np.repeat(np.arange(k // 3), 3)})


def test_egger_type_test_equals_statsmodels_wls_with_precision_column():
    df = _table()
    m = MetaRegression(moderators="x", test="knapp-hartung").fit(df, effect="y", variance="v")
    t = small_study_test(m)
    ext = MetaRegression(moderators="x + np.sqrt(v)", test="knapp-hartung").fit(
        df, effect="y", variance="v")
    X = np.column_stack([np.ones(len(df)), df["x"], np.sqrt(df["v"])])
    wls = sm.WLS(df["y"].to_numpy(), X, weights=1 / (df["v"].to_numpy() + ext.tau2_)).fit()
    assert_allclose(t.estimate, wls.params[2], rtol=1e-8)
    assert_allclose(t.se, wls.bse[2], rtol=1e-8)
    assert_allclose(t.statistic, wls.tvalues[2], rtol=1e-8)
    assert_allclose(t.p, wls.pvalues[2], rtol=1e-7)
    assert t.df == len(df) - 3 and t.test == "t"
    assert t.model == "REML model, moderators: x, t tests"
    assert set(t.moderator_estimates) == {"intercept", "x"}


def test_egger_type_test_keeps_the_nesting():
    df = _table(seed=3)
    m = MetaRegression(moderators="x", nested="study").fit(df, effect="y", variance="v")
    t = small_study_test(m)
    ref = MetaRegression(moderators="x + np.sqrt(v)", nested="study").fit(df, effect="y",
                                                                           variance="v")
    assert_allclose([t.estimate, t.se], [ref.coef_[-1], ref.se_[-1]], rtol=1e-8)
    assert "nested in study" in t.model and t.to_dict()["term"] == PRECISION_TERM


def test_checks_for_proportions_and_for_contrasts():
    df = _table(seed=5)
    m = MetaRegression(moderators="x").fit(df, effect="y", variance="v")
    prop = bias_checks(m, one_group_proportion=True)
    assert prop.fail_safe_n is None and prop.fail_safe_null is None
    assert "asymmetric by construction" in prop.cautions[0]
    assert any("not given (no null effect is meaningful" in line for line in prop.lines())
    assert prop.trim_and_fill is None and "no form with moderators" in prop.notes[0]
    contrast = bias_checks(m, null_effect="effect 0 (no difference)")
    assert contrast.fail_safe_n == fail_safe_n(df["y"], df["v"])
    assert contrast.fail_safe_null == "effect 0 (no difference)"
    resid = df["y"].to_numpy() - np.column_stack([np.ones(len(df)), df["x"]]) @ m.coef_
    assert_allclose(contrast.residual, resid, rtol=1e-12)
    plain = bias_checks(MetaRegression().fit(df, effect="y", variance="v"))
    assert plain.trim_and_fill is not None and plain.trim_and_fill["k"] == len(df)
