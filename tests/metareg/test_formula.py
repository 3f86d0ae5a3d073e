"""Moderators as formulas (formulaic): categories with a reference level, interactions,
polynomials, splines, no intercept; coefficients against statsmodels WLS at the fitted
tau² on formulaic's own model matrix (statsmodels 0.15, formulaic 1.2)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from formulaic import model_matrix
from numpy.testing import assert_allclose
from reference.bcg import table
from statsmodels.regression.linear_model import WLS

from envlink.metareg import MetaRegression


@pytest.mark.parametrize("formula", [
    "ablat + C(alloc, Treatment('random'))",
    "ablat * year",
    "ablat + I(ablat ** 2)",
    "bs(year, df=3)",
])
def test_formula_terms_match_wls(formula):
    df = table()
    m = MetaRegression(method="DL", moderators=formula).fit(df, effect="yi", variance="vi")
    X = np.asarray(model_matrix(formula, df), dtype=float)
    ref = WLS(df["yi"].to_numpy(), X, weights=1 / (df["vi"].to_numpy() + m.tau2_)).fit(
        cov_type="fixed scale")
    assert_allclose(m.coef_, ref.params, rtol=1e-7)
    assert_allclose(m.se_, ref.bse, rtol=1e-7)
    assert m.terms_[0] == "intercept"
    json.dumps(m.to_dict(), allow_nan=False)
    pred = m.predict(df.iloc[:4])
    assert_allclose(pred["estimate"], X[:4] @ m.coef_, rtol=1e-10)


def test_reference_level_and_no_intercept():
    df = table()
    m = MetaRegression(moderators="C(alloc, Treatment('systematic'))").fit(df, effect="yi",
                                                                          variance="vi")
    lvl = "C(alloc, Treatment('systematic'))"
    assert m.terms_ == ["intercept", f"{lvl}[T.alternate]", f"{lvl}[T.random]"]
    m0 = MetaRegression(moderators="0 + C(alloc)", intercept=True).fit(df, effect="yi",
                                                                       variance="vi")
    assert "intercept" not in m0.terms_ and len(m0.terms_) == 3
    m1 = MetaRegression(moderators="ablat", intercept=False).fit(df, effect="yi", variance="vi")
    assert m1.terms_ == ["ablat"] and m1.Q_M_df_ == 1


def test_summary_text_and_html():
    df = table()
    s = MetaRegression(moderators="ablat", cluster="alloc").fit(df, effect="yi",
                                                                variance="vi").summary()
    text = str(s)
    assert "ablat" in text and "CR2 cluster-robust (3 clusters)" in text
    html = s._repr_html_()
    assert html.startswith("<div") and "<td>ablat</td>" in html
