"""The large-fit paths give the answers of the ordinary ones.

References: the Q-profile interval found one bound at a time by root finding
(``solve_q``: Newton steps, then Brent's method once bracketed), itself checked
against scipy's ``brentq`` on the BCG table in test_bcg.py (Colditz et al. 1994,
tests/reference/bcg.py); R² from a separate fit of the model without moderators
(Raudenbush 2009); the ordinary reading of tables (pandas, the model frame); and
statsmodels' WLS at a fixed tau² for a badly conditioned design.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from benchmarks.bench_metareg import simulate
from numpy.testing import assert_allclose
from reference.bcg import table

from envlink.cli import main
from envlink.errors import ModelError
from envlink.metareg import MetaRegression, columns, lockstep
from envlink.metareg import estimators as est
from envlink.metareg.design import design_from_arrays
from envlink.metareg.results import qprofile_interval


def _bcg_design(mods: list[str]):
    df = table()
    X = df[mods].to_numpy(dtype=float) if mods else None
    return design_from_arrays(df["es"].to_numpy(), df["es_var"].to_numpy(), X, intercept=True)


@pytest.mark.parametrize("mods", [[], ["latitude_abs"], ["latitude_abs", "year"]])
@pytest.mark.parametrize("level", [0.95, 0.8])
def test_fast_interval_equals_root_found_interval_on_bcg(mods, level):
    d = _bcg_design(mods)
    g0 = est.gls(est.sums_at(d, 0.0), 0.0)
    root_found = qprofile_interval(d, level=level, multilevel=False, g0=g0).value
    fast, notes, _, passes = lockstep.qprofile_together(d, level=level, g0=g0)
    assert notes == ()
    assert_allclose(fast, root_found, rtol=1e-8, atol=1e-12)
    assert passes <= 12


def test_fast_interval_equals_root_found_interval_at_k_1e6():
    y, v, X = simulate(1_000_000, seed=11)
    m = MetaRegression(method="REML").fit(y=y, v=v, X=X)
    assert m._together is not None  # solved alongside tau² (k >= TOGETHER_MIN_K)
    root_found = qprofile_interval(m.design_, level=0.95, multilevel=False, g0=m._g0).value
    assert_allclose(m.tau2_ci_, root_found, rtol=1e-8)
    base = MetaRegression(method="REML").fit(y=y, v=v)  # R²'s base model, fitted apart
    assert_allclose(m.R2_, 100 * (base.tau2_ - m.tau2_) / base.tau2_, rtol=1e-8)


def _flat(r: dict) -> dict:
    """The fit.json values these tests compare, by their format 2.0 key paths."""
    h, m = r["heterogeneity"], r["moderator_test"]
    return {"tau2": h["tau2"], "I2": h["I2_percent"], "H2": h["H2"], "R2": h["R2_percent"],
            "Q_E": h["residual_test"]["Q_E"], "Q_E_p": h["residual_test"]["p"],
            "Q_M": m["Q_M"], "Q_M_p": m["p"],
            "tau2_ci": [h["tau2_interval"]["low"], h["tau2_interval"]["high"]],
            "coefficients": r["coefficients"]["table"], "warnings": r["warnings"]}


@pytest.mark.parametrize("method", ["REML", "ML"])
def test_large_fit_solved_together_equals_one_solver_at_a_time(monkeypatch, method):
    y, v, X = simulate(150_000, seed=12)
    together = MetaRegression(method=method).fit(y=y, v=v, X=X)
    monkeypatch.setattr(lockstep, "TOGETHER_MIN_K", 10**9)
    monkeypatch.setattr("envlink.metareg.lockstep.TOGETHER_MIN_K", 10**9)
    alone = MetaRegression(method=method).fit(y=y, v=v, X=X)
    assert together._together is not None and alone._together is None
    a, b = _flat(together.to_dict()), _flat(alone.to_dict())
    for key in ("tau2", "I2", "H2", "R2", "Q_E", "Q_M"):
        assert_allclose(a[key], b[key], rtol=1e-9, err_msg=key)
    assert_allclose(a["tau2_ci"], b["tau2_ci"], rtol=1e-9)
    for ca, cb in zip(a["coefficients"], b["coefficients"], strict=True):
        assert_allclose([ca["estimate"], ca["se"]], [cb["estimate"], cb["se"]], rtol=1e-9)


def test_uncentred_moderator_matches_statsmodels_wls():
    # calendar years as a moderator: (X'WX) has a condition number near 1e11 unshifted
    from statsmodels.regression.linear_model import WLS

    df = table()
    m = MetaRegression(moderators="latitude_abs + year", tau2=0.05).fit(df, effect="es", variance="es_var")
    Xa = np.column_stack([np.ones(len(df)), df["latitude_abs"], df["year"]]).astype(float)
    ref = WLS(df["es"], Xa, weights=1 / (df["es_var"] + 0.05)).fit(cov_type="fixed scale")
    assert_allclose(m.coef_, ref.params, rtol=1e-10)
    assert_allclose(m.se_, ref.bse, rtol=1e-10)


# ---------------------------------------------------------------- envlink fit's fast path
def _big_table(k: int = 70_000, seed: int = 3) -> pd.DataFrame:
    y, v, X = simulate(k, seed=seed)
    df = pd.DataFrame({"y": y, "v": v, "x1": X[:, 0], "x2": X[:, 1] * 1000 + 1950})
    df.loc[[10, 40_000], "y"] = np.nan
    df.loc[20, "x2"] = np.inf  # not finite: left out as a missing moderator is
    return df


def _fit_json(tmp_path, path, name, *extra):
    out = tmp_path / f"{name}.json"
    assert main(["fit", str(path), "--effect", "y", "--variance", "v", "--moderators",
                 "x1 + x2", "--json", str(out), *extra]) == 0
    return json.loads(out.read_text())


@pytest.mark.requires_pyarrow
@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_fit_fast_path_equals_ordinary_path(tmp_path, monkeypatch, capsys, suffix):
    path = tmp_path / f"big{suffix}"
    df = _big_table()
    if suffix == ".csv":  # 'inf' written as text: the ordinary reader's rules apply (no fast path)
        df.loc[20, "x2"] = np.nan
    df.to_parquet(path) if suffix == ".parquet" else df.to_csv(path, index=False)
    d = columns.design_from_table_file(path, effect="y", variance="v", moderators="x1 + x2")
    assert d is not None and d.k == len(df) - 3
    fast = _flat(_fit_json(tmp_path, path, "fast"))
    monkeypatch.setattr(columns, "FAST_MIN_ROWS", 10**9)  # the ordinary path: pandas, formulaic
    assert columns.design_from_table_file(path, effect="y", variance="v",
                                          moderators="x1 + x2") is None
    ordinary = _flat(_fit_json(tmp_path, path, "ordinary"))
    capsys.readouterr()
    assert fast["warnings"] == ordinary["warnings"]
    assert "3 row(s) dropped for missing effect, variance or moderator values (rows 11, 21, 40001)" \
        in fast["warnings"][0]
    for key in ("tau2", "I2", "H2", "R2", "Q_E", "Q_M", "Q_E_p", "Q_M_p"):
        assert_allclose(fast[key], ordinary[key], rtol=1e-10, err_msg=key)
    assert_allclose(fast["tau2_ci"], ordinary["tau2_ci"], rtol=1e-10)
    for a, b in zip(fast["coefficients"], ordinary["coefficients"], strict=True):
        assert a["term"] == b["term"]
        for key in ("estimate", "se", "statistic", "ci_low", "ci_high"):
            assert_allclose(a[key], b[key], rtol=1e-10, err_msg=key)


@pytest.mark.requires_pyarrow
def test_fit_fast_path_names_a_bad_variance_as_the_ordinary_path(tmp_path, capsys):
    df = _big_table()
    df.loc[123, "v"] = -0.5
    path = tmp_path / "bad.parquet"
    df.to_parquet(path)
    with pytest.raises(ModelError, match=r"Sampling variance 'v' must be positive and finite; "
                                         r"row 124 has -0\.5 \(1 such row"):
        columns.design_from_table_file(path, effect="y", variance="v", moderators="x1 + x2")
    assert main(["fit", str(path), "--effect", "y", "--variance", "v"]) == 2  # bad input
    assert "row 124 has -0.5" in capsys.readouterr().err


@pytest.mark.requires_pyarrow
def test_fast_path_leaves_formulas_labels_and_text_to_the_ordinary_path(tmp_path):
    df = _big_table()
    df["zone"] = np.where(df["x1"] > 0, "reef", "flat")
    path = tmp_path / "t.parquet"
    df.to_parquet(path)
    args = {"effect": "y", "variance": "v"}
    assert columns.design_from_table_file(path, moderators="C(zone)", **args) is None
    assert columns.design_from_table_file(path, moderators="zone", **args) is None  # text
    assert columns.design_from_table_file(path, moderators="np.log(v)", **args) is None
    df.assign(locate_status="ok").to_parquet(path)
    assert columns.design_from_table_file(path, moderators="x1", **args) is None
    csv = tmp_path / "t.csv"
    df.drop(columns="zone").to_csv(csv, index=False, sep=";", decimal=",")
    assert columns.design_from_table_file(csv, moderators="x1", **args) is None  # decimal commas


@pytest.mark.quick_benchmark
def test_quick_benchmark_fit_whole_process():
    from benchmarks.bench_fit_cli import main as bench

    res = bench(["--quick"])
    assert max(res["max_rel_diff"].values()) < 1e-10  # the hand-written reference's answers
    assert res["envlink_peak_mib"]["median"] < res["reference_peak_mib"]["median"] + 300
