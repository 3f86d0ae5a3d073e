"""Effect sizes from summary data: formulas against worked examples, statsmodels and hand computation."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from reference.effect_sizes import (
    BORENSTEIN_CH4_SMD,
    BORENSTEIN_CH5_BINARY,
    BORENSTEIN_CH6_CORRELATION,
    CONTINUOUS_CASES,
    HEDGES_1981_J,
    PROPORTION_CASES,
)
from statsmodels.stats.meta_analysis import effectsize_2proportions, effectsize_smd

import envlink
from envlink import effects as ef
from envlink.errors import InputError

# ---------------------------------------------------------------- worked examples


def test_hedges_g_borenstein_chapter_4() -> None:
    ref = BORENSTEIN_CH4_SMD
    a = ref["inputs"]
    dec = ref["decimals"]
    # hand computation (Borenstein et al. 2009, ch. 4 formulas), independent of envlink
    sw = math.sqrt(((a["n1"] - 1) * a["sd1"] ** 2 + (a["n2"] - 1) * a["sd2"] ** 2) / (a["n1"] + a["n2"] - 2))
    d = (a["mean1"] - a["mean2"]) / sw
    vd = (a["n1"] + a["n2"]) / (a["n1"] * a["n2"]) + d**2 / (2 * (a["n1"] + a["n2"]))
    j = 1 - 3 / (4 * (a["n1"] + a["n2"] - 2) - 1)
    # the recalled book values (from memory) agree with the hand computation to 4 dp
    assert round(sw, dec) == ref["s_within"]
    assert round(d, dec) == ref["d"]
    assert round(vd, dec) == ref["var_d"]
    assert round(j, dec) == ref["j_approx"]
    assert round(j * d, dec) == ref["g"]
    assert round(j**2 * vd, dec) == ref["var_g"]
    approx = ef.hedges_g(*a.values(), exact=False)
    assert_allclose(approx.effect, [j * d], rtol=1e-12)
    assert_allclose(approx.variance, [j**2 * vd], rtol=1e-12)
    exact = ef.hedges_g(*a.values())
    assert_allclose(exact.effect, [ref["g"]], atol=5e-5)  # book, 4 dp (from memory)
    assert_allclose(exact.variance, [ref["var_g"]], atol=5e-5)
    assert exact.flags.tolist() == [""]


def test_exact_j_hand_and_hedges_1981_table() -> None:
    for df, tabled in HEDGES_1981_J.items():
        hand = math.gamma(df / 2) / (math.sqrt(df / 2) * math.gamma((df - 1) / 2))
        assert_allclose(ef.hedges_j(df), hand, rtol=1e-12)
        assert_allclose(ef.hedges_j(df), tabled, atol=5e-5)  # Hedges 1981 table, from memory
    # large df: exact J and the approximation agree to O(df^-2) (Hedges 1981)
    df = np.array([50.0, 200.0, 5000.0, 1e6])
    assert_allclose(ef.hedges_j(df), ef.hedges_j(df, exact=False), rtol=2e-5)


def test_binary_borenstein_chapter_5() -> None:
    ref = BORENSTEIN_CH5_BINARY
    a, b = 5, 95
    c, d = 10, 90
    # hand computation: Borenstein et al. 2009, ch. 5
    log_or = math.log(a * d / (b * c))
    var_or = 1 / a + 1 / b + 1 / c + 1 / d
    log_rr = math.log((a / (a + b)) / (c / (c + d)))
    var_rr = 1 / a - 1 / (a + b) + 1 / c - 1 / (c + d)
    assert round(log_or, 4) == ref["log_or"] and round(var_or, 4) == ref["var_log_or"]
    assert round(log_rr, 4) == ref["log_rr"] and round(var_rr, 4) == ref["var_log_rr"]
    res_or = ef.log_odds_ratio(*ref["inputs"].values())
    res_rr = ef.log_risk_ratio(*ref["inputs"].values())
    assert_allclose([res_or.effect[0], res_or.variance[0]], [log_or, var_or], rtol=1e-12)
    assert_allclose([res_rr.effect[0], res_rr.variance[0]], [log_rr, var_rr], rtol=1e-12)


def test_fisher_z_borenstein_chapter_6() -> None:
    ref = BORENSTEIN_CH6_CORRELATION
    r, n = ref["inputs"]["r"], ref["inputs"]["n"]
    hand_z = 0.5 * math.log((1 + r) / (1 - r))  # Fisher 1921 / Borenstein ch. 6
    assert round(hand_z, 4) == ref["z"] and round(1 / (n - 3), 4) == ref["var_z"]
    res = ef.fisher_z(r, n)
    assert_allclose([res.effect[0], res.variance[0]], [hand_z, 1 / (n - 3)], rtol=1e-12)


# ---------------------------------------------------------------- statsmodels


def test_hedges_g_matches_statsmodels_approximate_j() -> None:
    rng = np.random.default_rng(5)
    m1, m2 = rng.normal(10, 2, 40), rng.normal(9, 2, 40)
    s1, s2 = rng.uniform(0.5, 3, 40), rng.uniform(0.5, 3, 40)
    n1, n2 = rng.integers(3, 200, 40).astype(float), rng.integers(3, 200, 40).astype(float)
    # statsmodels 0.14 effectsize_smd: g with J = 1 - 3/(4 N - 9); its variance uses
    # g² / (2 (N - 3.94)) (Hedges & Olkin form), not Borenstein's J² V_d, so only g is compared
    sm_g, _ = effectsize_smd(m1, s1, n1, m2, s2, n2)
    ours = ef.hedges_g(m1, s1, n1, m2, s2, n2, exact=False)
    assert_allclose(ours.effect, sm_g, rtol=1e-12)
    # the exact J moves g by less than 1e-3 relative once df >= 4
    assert_allclose(ef.hedges_g(m1, s1, n1, m2, s2, n2).effect, sm_g, rtol=1e-3)


@pytest.mark.parametrize(("kind", "statistic"), [("log_odds_ratio", "odds-ratio"), ("log_risk_ratio", "risk-ratio")])
def test_binary_matches_statsmodels(kind: str, statistic: str) -> None:
    x1 = np.array([5, 0, 12, 30, 7, 40])
    n1 = np.array([100, 25, 60, 30, 9, 80])
    x2 = np.array([10, 4, 0, 22, 7, 41])
    n2 = np.array([100, 30, 55, 35, 10, 90])
    # statsmodels 0.14 effectsize_2proportions: with zero_correction=0.5 it adds 0.5 to
    # the counts of every row but 1 to the totals only of rows with a zero cell, so it is
    # called on the zero-cell rows (0.5 to every cell there) and the others apart
    zero = np.array([False, True, True, True, False, False])
    sm_eff, sm_var = np.empty(6), np.empty(6)
    for mask, cc in ((zero, 0.5), (~zero, None)):
        sm_eff[mask], sm_var[mask] = effectsize_2proportions(
            x1[mask], n1[mask], x2[mask], n2[mask], statistic=statistic, zero_correction=cc
        )
    ours = getattr(ef, kind)(x1, n1, x2, n2)
    assert_allclose(ours.effect, sm_eff, rtol=1e-12)
    assert_allclose(ours.variance, sm_var, rtol=1e-12)
    assert ours.flags.tolist() == ["", "continuity_corrected", "continuity_corrected",
                                   "continuity_corrected", "", ""]  # fmt: skip


# ---------------------------------------------------------------- hand computation


@pytest.mark.parametrize("case", CONTINUOUS_CASES)
def test_continuous_kinds_by_hand(case: dict[str, float]) -> None:
    m1, s1, n1, m2, s2, n2 = case.values()
    a1, a2 = s1**2 / (n1 * m1**2), s2**2 / (n2 * m2**2)
    # Hedges, Gurevitch & Curtis 1999: ln RR and its delta-method variance
    lrr = ef.log_response_ratio(m1, s1, n1, m2, s2, n2)
    assert_allclose([lrr.effect[0], lrr.variance[0]], [math.log(m1 / m2), a1 + a2], rtol=1e-12)
    # Lajeunesse 2015, bias-corrected ln RR^Δ and its variance
    lrr_bc = ef.log_response_ratio(m1, s1, n1, m2, s2, n2, bias_correction=True)
    hand_bc = math.log(m1 / m2) + 0.5 * (s1**2 / (n1 * m1**2) - s2**2 / (n2 * m2**2))
    hand_vbc = a1 + a2 + 0.5 * (s1**4 / (n1**2 * m1**4) + s2**4 / (n2**2 * m2**4))
    assert_allclose([lrr_bc.effect[0], lrr_bc.variance[0]], [hand_bc, hand_vbc], rtol=1e-12)
    # Nakagawa et al. 2015: lnVR and lnCVR (mean and SD uncorrelated within a group)
    vr = ef.ln_vr(s1, n1, s2, n2)
    hand_vr = math.log(s1 / s2) + 1 / (2 * (n1 - 1)) - 1 / (2 * (n2 - 1))
    assert_allclose([vr.effect[0], vr.variance[0]], [hand_vr, 1 / (2 * (n1 - 1)) + 1 / (2 * (n2 - 1))], rtol=1e-12)
    cvr = ef.ln_cvr(m1, s1, n1, m2, s2, n2)
    hand_cvr = math.log((s1 / m1) / (s2 / m2)) + 1 / (2 * (n1 - 1)) - 1 / (2 * (n2 - 1))
    hand_vcvr = a1 + 1 / (2 * (n1 - 1)) + a2 + 1 / (2 * (n2 - 1))
    assert_allclose([cvr.effect[0], cvr.variance[0]], [hand_cvr, hand_vcvr], rtol=1e-12)


@pytest.mark.parametrize(("x", "n"), PROPORTION_CASES)
def test_proportion_kinds_by_hand(x: int, n: int) -> None:
    # Freeman & Tukey 1950 (halved) and its variance 1/(4n + 2)
    ft = ef.freeman_tukey(x, n)
    hand = 0.5 * (math.asin(math.sqrt(x / (n + 1))) + math.asin(math.sqrt((x + 1) / (n + 1))))
    assert_allclose([ft.effect[0], ft.variance[0]], [hand, 1 / (4 * n + 2)], rtol=1e-12)
    # arcsine square root, variance 1/(4n) (Borenstein et al. 2009 / common practice)
    asr = ef.arcsine_proportion(x, n)
    assert_allclose([asr.effect[0], asr.variance[0]], [math.asin(math.sqrt(x / n)), 1 / (4 * n)], rtol=1e-12)
    # logit with 0.5 added to both cells of a zero-cell row (common practice)
    xc, mc = (x + 0.5, n - x + 0.5) if x in (0, n) else (x, n - x)
    lg = ef.logit_proportion(x, n)
    assert_allclose([lg.effect[0], lg.variance[0]], [math.log(xc / mc), 1 / xc + 1 / mc], rtol=1e-12)
    assert lg.flags[0] == ("continuity_corrected" if x in (0, n) else "")


@pytest.mark.parametrize(("x", "n"), PROPORTION_CASES)
def test_freeman_tukey_inverse_miller_1978(x: int, n: int) -> None:
    t = 2 * ef.freeman_tukey(x, n).effect
    # Miller 1978 closed form, by hand
    s = math.sin(t[0])
    hand = 0.5 * (1 - math.copysign(1, math.cos(t[0])) * math.sqrt(max(0.0, 1 - (s + (s - 1 / s) / n) ** 2)))
    with pytest.warns(ef.BackTransformWarning, match="Schwarzer"):
        p, flags = ef.freeman_tukey_inverse(t / 2, n)
    assert_allclose(p, [hand], atol=1e-12)
    assert_allclose(p, [x / n], atol=1e-12)  # for one study with its own n it is exact
    assert flags[0].startswith("freeman_tukey_back_transform")


def test_freeman_tukey_inverse_clips_out_of_range() -> None:
    with pytest.warns(ef.BackTransformWarning):
        p, flags = ef.freeman_tukey_inverse([-0.1, 0.01, 1.7, np.nan], [20, 20, 20, 20])
    assert p[:3].tolist() == [0.0, 0.0, 1.0] and np.isnan(p[3])
    assert flags.tolist()[:3] == ["freeman_tukey_back_transform;back_transform_clipped"] * 3
    assert flags[3] == "freeman_tukey_back_transform;missing_input"


# ---------------------------------------------------------------- corrections and flags


def test_continuity_correction_rules() -> None:
    x1, n1, x2, n2 = [0, 3, 4], [10, 10, 10], [2, 5, 6], [10, 10, 10]
    rows = ef.log_odds_ratio(x1, n1, x2, n2)
    all_rows = ef.log_odds_ratio(x1, n1, x2, n2, zero_cells="all_rows")
    none = ef.log_odds_ratio(x1, n1, x2, n2, zero_cells="none")
    assert rows.flags.tolist() == ["continuity_corrected", "", ""]
    assert all_rows.flags.tolist() == ["continuity_corrected"] * 3
    assert none.flags.tolist() == ["zero_cell", "", ""] and np.isnan(none.effect[0])
    # hand: row 2 with 0.5 in every cell (all_rows), and unchanged (zero_rows)
    assert_allclose(all_rows.effect[1], math.log(3.5 * 5.5 / (7.5 * 5.5)), rtol=1e-12)
    assert_allclose(rows.effect[1], math.log(3 * 5 / (7 * 5)), rtol=1e-12)
    assert_allclose(none.effect[1:], rows.effect[1:], rtol=1e-15)
    custom = ef.logit_proportion([0], [10], correction=0.25)
    assert_allclose(custom.effect, [math.log(0.25 / 10.25)], rtol=1e-12)
    double = ef.log_risk_ratio([0], [10], [0], [12])
    assert double.flags[0] == "continuity_corrected;double_zero" and np.isfinite(double.effect[0])
    with pytest.raises(InputError, match="'zero_cells' parameter of logit_proportion"):
        ef.logit_proportion([1], [2], zero_cells="some")
    with pytest.raises(InputError, match="'correction' parameter"):
        ef.log_odds_ratio([1], [2], [1], [2], correction=0)
    with pytest.raises(InputError, match="'correction' parameter of logit_proportion must be a positive number"):
        ef.logit_proportion([1], [2], correction="half")  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("call", "flag"),
    [
        (lambda: ef.logit_proportion([12], [10]), "events_exceed_total"),
        (lambda: ef.freeman_tukey([-1], [10]), "negative_count"),
        (lambda: ef.arcsine_proportion([0], [0]), "zero_total"),
        (lambda: ef.logit_proportion([np.nan], [10]), "missing_input"),
        (lambda: ef.log_odds_ratio([1], [5], [7], [6]), "events_exceed_total"),
        (lambda: ef.hedges_g([1], [-1], [10], [0], [1], [10]), "negative_sd"),
        (lambda: ef.hedges_g([1], [1], [1], [0], [1], [10]), "sample_size_below_2"),
        (lambda: ef.hedges_g([1], [0], [5], [0], [0], [10]), "zero_sd"),
        (lambda: ef.log_response_ratio([1], [1], [10], [0], [1], [10]), "nonpositive_mean"),
        (lambda: ef.log_response_ratio([-2], [1], [10], [3], [1], [10]), "nonpositive_mean"),
        (lambda: ef.ln_cvr([2], [1], [10], [-3], [1], [10]), "nonpositive_mean"),
        (lambda: ef.ln_vr([0], [10], [1], [10]), "zero_sd"),
        (lambda: ef.ln_vr([1], [10], [1], [np.inf]), "nonfinite_input"),
        (lambda: ef.fisher_z([1.5], [20]), "correlation_out_of_range"),
        (lambda: ef.fisher_z([-1.0], [20]), "correlation_at_bound"),
        (lambda: ef.fisher_z([0.3], [3]), "sample_size_at_most_3"),
        (lambda: ef.hedges_g([1e308], [1], [10], [-1e308], [1], [10]), "nonfinite_result"),
    ],
)
def test_impossible_input_gives_flagged_nan_row(call, flag: str) -> None:  # type: ignore[no-untyped-def]
    res = call()
    assert np.isnan(res.effect[0]) and np.isnan(res.variance[0])
    assert flag in res.flags[0].split(";")


def test_bad_rows_do_not_disturb_good_rows() -> None:
    res = ef.fisher_z([0.2, 2.0, np.nan, 0.4], [30, 30, 30, 2])
    assert_allclose(res.effect[0], math.atanh(0.2), rtol=1e-12)
    assert np.isnan(res.effect[1:]).all()
    assert res.flags.tolist() == ["", "correlation_out_of_range", "missing_input", "sample_size_at_most_3"]
    frac = ef.logit_proportion([2.5], [10])
    assert frac.flags[0] == "non_integer_count" and np.isfinite(frac.effect[0])


def test_array_functions_reject_text_with_clear_error() -> None:
    with pytest.raises(InputError, match="fisher_z needs numbers for r, n"):
        ef.fisher_z(["a"], [10])


# ---------------------------------------------------------------- table-level


def test_effect_sizes_table_keeps_rows_and_columns() -> None:
    t = pd.DataFrame(
        {
            "study": ["s1", "s2", "s3", "s4"],
            "m_t": ["103", "x", 12, 5],
            "sd_t": [5.5, 1, 3, 1],
            "n_t": [50, 10, 20, 1],
            "m_c": [100, 1, 10, 4],
            "sd_c": [4.5, 1, 2, 1],
            "n_c": [50, 10, 20, 10],
        },
        index=[10, 11, 12, 13],
    )
    out = envlink.effect_sizes(t, "hedges_g", mean1="m_t", sd1="sd_t", n1="n_t", mean2="m_c", sd2="sd_c", n2="n_c")
    assert list(out.columns) == [*t.columns, "effect", "variance", "effect_flags"]
    assert list(out.index) == [10, 11, 12, 13]
    pd.testing.assert_frame_equal(out[t.columns], t)
    assert t.shape == (4, 7)  # input untouched
    direct = ef.hedges_g([103, 12], [5.5, 3], [50, 20], [100, 10], [4.5, 2], [50, 20])
    assert_allclose(out["effect"].to_numpy()[[0, 2]], direct.effect, rtol=1e-15)
    assert out["effect_flags"].tolist() == ["", "unreadable_number", "", "sample_size_below_2"]
    assert out["effect"].isna().tolist() == [False, True, False, True]


def test_effect_sizes_text_table_and_options() -> None:
    t = pd.DataFrame({"sick": ["0", " 3 ", ""], "seen": ["10", "40", "25"]}, dtype="string")
    out = envlink.effect_sizes(
        t, "logit_proportion", events="sick", total="seen", name="lp", variance_name="lp_var",
        flags_name="lp_qa", correction=0.25,
    )  # fmt: skip
    assert_allclose(out["lp"].to_numpy()[:2], [math.log(0.25 / 10.25), math.log(3 / 37)], rtol=1e-12)
    assert out["lp_qa"].tolist() == ["continuity_corrected", "", "missing_input"]
    rr = envlink.effect_sizes(
        pd.DataFrame({"a": [12.0], "b": [3.0], "c": [20], "d": [10.0], "e": [2.0], "f": [20]}),
        "log_response_ratio", mean1="a", sd1="b", n1="c", mean2="d", sd2="e", n2="f", bias_correction=True,
    )  # fmt: skip
    assert_allclose(rr["effect"], ef.log_response_ratio(12, 3, 20, 10, 2, 20, bias_correction=True).effect, rtol=1e-15)


@pytest.mark.parametrize("kind", ef.EFFECT_KINDS.names())
def test_every_kind_reachable_from_table(kind: str) -> None:
    needed = ef.EFFECT_KINDS[kind].info["roles"]
    values = {"events": 3, "total": 20, "events1": 3, "total1": 20, "events2": 6, "total2": 22,
              "mean1": 5.0, "sd1": 1.0, "n1": 12, "mean2": 4.0, "sd2": 1.5, "n2": 14, "r": 0.3, "n": 40}  # fmt: skip
    t = pd.DataFrame({f"col_{k}": [values[k]] for k in needed})
    out = envlink.effect_sizes(t, kind, **{k: f"col_{k}" for k in needed})  # type: ignore[arg-type]
    direct = getattr(ef, kind)(*[values[k] for k in needed])
    assert_allclose(out["effect"], direct.effect, rtol=1e-15)
    assert_allclose(out["variance"], direct.variance, rtol=1e-15)
    assert np.isfinite(out["effect"]).all()


def test_effect_sizes_errors() -> None:
    t = pd.DataFrame({"diseased": [1], "examined": [5], "effect": [0.1]})
    with pytest.raises(InputError, match=r"The 'kind' parameter of effect_sizes must be one of .*'logit_proportion'"):
        envlink.effect_sizes(t, "logit", events="diseased", total="examined")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="no column 'diseasd'. Did you mean 'diseased'"):
        envlink.effect_sizes(t, "logit_proportion", events="diseasd", total="examined", name="lp")
    with pytest.raises(InputError, match="missing total"):
        envlink.effect_sizes(t, "logit_proportion", events="diseased", name="lp")
    with pytest.raises(InputError, match="unknown n"):
        envlink.effect_sizes(t, "logit_proportion", events="diseased", total="examined", n="examined", name="lp")
    with pytest.raises(InputError, match="already has a column 'effect'"):
        envlink.effect_sizes(t, "logit_proportion", events="diseased", total="examined")
    with pytest.raises(InputError, match="'exact' parameter of effect_sizes"):
        envlink.effect_sizes(t, "logit_proportion", events="diseased", total="examined", name="lp", exact=False)


_NAN_FLAGS = {
    "missing_input", "unreadable_number", "nonfinite_input", "negative_count", "zero_total", "events_exceed_total",
    "zero_cell", "sample_size_below_2", "negative_sd", "zero_sd", "nonpositive_mean",
    "correlation_out_of_range", "correlation_at_bound", "sample_size_at_most_3", "nonfinite_result",
}  # fmt: skip


def test_any_numbers_give_a_value_or_a_reason() -> None:
    # property (common practice for table stages): no row raises, and a row has no value
    # exactly when one of its flags says why
    from hypothesis import given, settings
    from hypothesis import strategies as st

    number = st.one_of(st.floats(allow_nan=True, allow_infinity=True, width=64), st.integers(-5, 300))

    @settings(max_examples=150, deadline=None)
    @given(st.sampled_from(ef.EFFECT_KINDS.names()), st.lists(st.lists(number, min_size=6, max_size=6), min_size=1, max_size=8))
    def check(kind: str, rows: list[list[float]]) -> None:
        func, needed = getattr(ef, kind), ef.EFFECT_KINDS[kind].info["roles"]
        cols = np.array(rows, dtype=np.float64)[:, : len(needed)].T
        res = func(*cols)
        assert res.effect.shape == res.variance.shape == res.flags.shape == (len(rows),)
        for e, v, f in zip(res.effect, res.variance, res.flags, strict=True):
            reasons = set(f.split(";")) & _NAN_FLAGS
            if np.isnan(e) or np.isnan(v):
                assert reasons, f
            else:
                assert not reasons and np.isfinite(e) and np.isfinite(v)

    check()


def test_effect_sizes_reads_messy_number_text() -> None:
    # Cells as spreadsheets and semicolon CSVs write them (common practice): full-width
    # digits, no-break and zero-width spaces, a minus sign, decimal commas.
    t = pd.DataFrame({"sick": ["\uff13", "3\u200b", "\u00a03\u00a0", "3"],
                      "seen": ["40", "40", "40", "40"]}, dtype="string")
    out = envlink.effect_sizes(t, "logit_proportion", events="sick", total="seen")
    assert_allclose(out["effect"].to_numpy(), [math.log(3 / 37)] * 4, rtol=1e-15)
    assert out["effect_flags"].tolist() == ["", "", "", ""]
    g = pd.DataFrame({"m1": ["12,5", "\u22121,25"], "s1": ["2", "2"], "n1": ["10", "10"],
                      "m2": ["10", "10"], "s2": ["2", "2"], "n2": ["10", "10"]})
    got = envlink.effect_sizes(g, "hedges_g", mean1="m1", sd1="s1", n1="n1", mean2="m2", sd2="s2", n2="n2")
    direct = ef.hedges_g([12.5, -1.25], [2, 2], [10, 10], [10, 10], [2, 2], [10, 10])
    assert_allclose(got["effect"].to_numpy(), direct.effect, rtol=1e-15)


def test_effect_sizes_unreadable_cell_is_not_called_missing() -> None:
    # 'abc' is not a blank: the flag says the cell is not a number. '1,234' could be a
    # thousands separator or a decimal comma, so it is not guessed.
    t = pd.DataFrame({"sick": ["abc", "", "1,234", "n/a"], "seen": ["40", "", "4000", "10"]})
    out = envlink.effect_sizes(t, "logit_proportion", events="sick", total="seen")
    assert out["effect_flags"].tolist() == ["unreadable_number", "missing_input", "unreadable_number",
                                            "missing_input"]
    assert out["effect"].isna().all()
