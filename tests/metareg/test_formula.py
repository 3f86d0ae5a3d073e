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

from envlink.errors import InputError
from envlink.metareg import MetaRegression


@pytest.mark.parametrize("formula", [
    "latitude_abs + C(allocation, Treatment('random'))",
    "latitude_abs * year",
    "latitude_abs + I(latitude_abs ** 2)",
    "bs(year, df=3)",
])
def test_formula_terms_match_wls(formula):
    df = table()
    m = MetaRegression(method="DL", moderators=formula).fit(df, effect="es", variance="es_var")
    X = np.asarray(model_matrix(formula, df), dtype=float)
    ref = WLS(df["es"].to_numpy(), X, weights=1 / (df["es_var"].to_numpy() + m.tau2_)).fit(
        cov_type="fixed scale")
    assert_allclose(m.coef_, ref.params, rtol=1e-7)
    assert_allclose(m.se_, ref.bse, rtol=1e-7)
    assert m.terms_[0] == "intercept"
    json.dumps(m.to_dict(), allow_nan=False)
    pred = m.predict(df.iloc[:4])
    assert_allclose(pred["estimate"], X[:4] @ m.coef_, rtol=1e-10)


def test_reference_level_and_no_intercept():
    df = table()
    m = MetaRegression(moderators="C(allocation, Treatment('systematic'))").fit(df, effect="es",
                                                                          variance="es_var")
    lvl = "C(allocation, Treatment('systematic'))"
    assert m.terms_ == ["intercept", f"{lvl}[T.alternate]", f"{lvl}[T.random]"]
    m0 = MetaRegression(moderators="0 + C(allocation)", intercept=True).fit(df, effect="es",
                                                                       variance="es_var")
    assert "intercept" not in m0.terms_ and len(m0.terms_) == 3
    m1 = MetaRegression(moderators="latitude_abs", intercept=False).fit(df, effect="es", variance="es_var")
    assert m1.terms_ == ["latitude_abs"] and m1.Q_M_df_ == 1


def test_summary_text_and_html():
    df = table()
    s = MetaRegression(moderators="latitude_abs", cluster="allocation").fit(df, effect="es",
                                                                variance="es_var").summary()
    text = str(s)
    assert "latitude_abs" in text and "CR2 cluster-robust" in text and "(3 clusters of allocation)" in text
    html = s._repr_html_()
    assert html.startswith("<div") and "<td>latitude_abs</td>" in html


@pytest.mark.parametrize("formula,intercept,where,caret", [
    ("latitude_abs +", True, "at character 14 ('+')", " " * 17 + "^"),
    ("latitude_abs +", False, "at character 14 ('+')", " " * 17 + "^"),  # '0 + ' added inside is not counted
    ("  latitude_abs + (year", True, "at character 18 ('(')", " " * 21 + "^"),
    ("C(allocation", True, "at character 1 ('C(allocation')", "    " + "^" * 12),
])
def test_formula_errors_quote_the_formula_and_point_in_plain_text(formula, intercept, where, caret):
    with pytest.raises(InputError) as info:
        MetaRegression(moderators=formula, intercept=intercept).fit(table(), effect="es",
                                                                    variance="es_var")
    msg = str(info.value)
    assert "\x1b" not in msg and "\u29db" not in msg and "\u29da" not in msg  # no terminal codes
    first, shown, pointer = msg.split("\n")
    assert first.startswith(f"Cannot parse the moderator formula {formula!r}: {where}: ")
    assert shown == f"    {formula}" and pointer == caret
    assert "insuffient" not in msg


def test_formula_with_a_left_side_or_unknown_function_is_bad_input():
    with pytest.raises(InputError, match=r"'es ~ latitude_abs' must be a right-hand side only"):
        MetaRegression(moderators="es ~ latitude_abs").fit(table(), effect="es", variance="es_var")
    with pytest.raises(InputError, match=r"'lg' in the moderator formula 'lg\(latitude_abs\)' is neither a "
                       r"column of the table nor a function the formula knows"):
        MetaRegression(moderators="lg(latitude_abs)").fit(table(), effect="es", variance="es_var")


def test_text_numbers_as_a_plain_term_are_refused_not_made_categories():
    df = table()
    df["depth_txt"] = [f"{a:.1f}".replace(".", ",") for a in df["latitude_abs"]]
    df.loc[2, "depth_txt"] = "approx. 5"
    with pytest.raises(InputError) as info:
        MetaRegression(moderators="depth_txt").fit(df, effect="es", variance="es_var")
    msg = str(info.value)
    assert msg.startswith("Column 'depth_txt' holds numbers written as text (row 1 holds '44,0')")
    assert "row 3 holds 'approx. 5', which is not a number" in msg
    assert msg.endswith("write C(depth_txt) in the moderators if it is a category.")
    # the user's choice of a category, and a column of words, stay categories
    m = MetaRegression(moderators="C(depth_txt)", method="DL").fit(df, effect="es", variance="es_var")
    assert m.p_ == 10 and "C(depth_txt)[T.approx. 5]" in m.terms_
    m = MetaRegression(moderators="allocation", method="DL").fit(df, effect="es", variance="es_var")
    assert m.terms_ == ["intercept", "allocation[T.random]", "allocation[T.systematic]"]
