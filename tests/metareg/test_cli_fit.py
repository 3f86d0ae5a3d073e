"""``envlink fit`` end to end: the JSON contract of docs/methods.md ("Result fields"), exit codes, messages."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
from reference.bcg import table

from envlink.cli import main
from envlink.metareg import MetaRegression

#: the sections of the result and their keys (docs/methods.md, "Result fields")
CONTRACT = {
    "format_version": None,
    "model": ["tau2_method", "tau2_method_words", "effects_used", "rows_left_out",
              "coefficient_count", "moderators", "nested", "cluster", "cluster_count",
              "confidence_level", "converged", "iterations"],
    "heterogeneity": ["tau2", "tau2_interval", "I2_percent", "H2", "R2_percent", "residual_test",
                      "pooled_prediction_interval"],
    "moderator_test": ["Q_M", "distribution", "df", "df_denominator", "p"],
    "coefficients": ["test", "test_words", "df", "table"],
    "variance_components": None,
    "diagnostics": None,
    "warnings": None,
}


@pytest.fixture
def bcg_csv(tmp_path):
    p = tmp_path / "bcg.csv"
    df = table()
    df["study"] = [f"s{i // 2}" for i in range(13)]
    df.to_csv(p, index=False)
    return p


def test_fit_json_contract(bcg_csv, tmp_path, capsys):
    out = tmp_path / "fit.json"
    rc = main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--moderators", "latitude_abs",
               "--test", "knapp-hartung", "--json", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "latitude_abs" in text and "Q_E" in text
    got = json.loads(out.read_text())
    assert list(got) == list(CONTRACT) and got["format_version"] == "2.0"
    for section, keys in CONTRACT.items():
        if keys is not None:
            assert list(got[section]) == keys, section
    assert got["coefficients"]["test"] == "t" and got["coefficients"]["df"] == 11
    assert got["moderator_test"]["distribution"] == "F"
    assert got["moderator_test"]["df"] == 1 and got["moderator_test"]["df_denominator"] == 11
    assert list(got["heterogeneity"]["residual_test"]) == ["Q_E", "df", "p"]
    assert list(got["heterogeneity"]["tau2_interval"]) == ["low", "high", "method"]
    rows = got["coefficients"]["table"]
    assert [c["term"] for c in rows] == ["intercept", "latitude_abs"]
    assert list(rows[0]) == ["term", "estimate", "se", "statistic", "p", "ci_low", "ci_high", "df"]
    ref = MetaRegression(moderators="latitude_abs", test="knapp-hartung").fit(table(), effect="es",
                                                                      variance="es_var")
    np.testing.assert_allclose(got["heterogeneity"]["tau2"], ref.tau2_, rtol=1e-12)
    assert got["model"]["effects_used"] == 13 and got["model"]["coefficient_count"] == 2
    assert got == json.loads(json.dumps(ref.to_dict()))


def test_fit_text_layout_is_envlinks(bcg_csv, capsys):
    # sections of envlink's own design; p below 1e-16 reads "p < 1e-16"; whole df as integers
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--method", "DL",
                 "--test", "knapp-hartung"]) == 0
    text = capsys.readouterr().out
    for title in ("The model and its data", "Heterogeneity", "Moderator test", "Coefficients"):
        assert f"\n{title}\n" in text
    assert "p < 1e-16" in text and "p = <" not in text  # Q_E = 152.2 on 12 df (Colditz data)
    assert "closed form" in text and "0 iteration" not in text  # DL is not iterative
    assert "Knapp-Hartung t tests, 12 df" in text and "12.0000" not in text
    assert re.search(r"intercept .* 12$", text, re.MULTILINE)  # the df column: 12, not 12.0
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--moderators", "latitude_abs"]) == 0
    text = capsys.readouterr().out
    assert "chi² = " in text and "with 1 df" in text and "on (1) df" not in text


def test_fit_prediction_interval_option(bcg_csv, tmp_path, capsys):
    from scipy import stats

    out = tmp_path / "fit.json"
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--prediction", "Riley",
                 "--json", str(out)]) == 0
    pi = json.loads(out.read_text())["heterogeneity"]["pooled_prediction_interval"]
    ref = MetaRegression().fit(table(), effect="es", variance="es_var")
    # Riley, Higgins & Deeks (2011): mu ± t_(k-2) sqrt(se² + tau²)
    half = stats.t.ppf(0.975, 11) * np.sqrt(ref.se_[0] ** 2 + ref.tau2_)
    assert pi["rule"] == "riley" and pi["df"] == 11
    np.testing.assert_allclose([pi["low"], pi["high"]], [ref.coef_[0] - half, ref.coef_[0] + half],
                               rtol=1e-10)
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--prediction", "rilye"]) == 2
    assert "Did you mean 'riley'" in capsys.readouterr().err


def test_fit_notes_name_options_not_parameters(bcg_csv, capsys):
    # a message that names a Python parameter (nested=) reads as the option on the command
    # line; one row per level of --nested is refused (a flat likelihood), naming the option
    df = pd.read_csv(bcg_csv).assign(each=[f"r{i}" for i in range(13)])
    df.to_csv(bcg_csv, index=False)
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--nested", "each"]) == 2
    cap = capsys.readouterr()
    assert "--nested each" in cap.err and "nested=" not in cap.err + cap.out


def test_fit_help_is_true(capsys):
    assert main(["fit", "--help"]) == 0
    text = capsys.readouterr().out
    assert not re.search(r"\b(es|es_var)\b", text)  # envlink's own column names in the examples
    assert "--effect effect --variance variance" in text
    assert "A column of text\nis fitted as a category" in text
    for option in ("--report", "--figures", "--label", "--forest-order", "--prediction", "--bubble"):
        assert option in text
    assert "dersimonian-laird" in text and "restricted-maximum-likelihood" in text


def test_fit_nested_cluster_parquet_and_permutations(bcg_csv, tmp_path, capsys):
    import pandas as pd

    pq = tmp_path / "bcg.parquet"
    pd.read_csv(bcg_csv).to_parquet(pq)
    out = tmp_path / "f.json"
    rc = main(["fit", str(pq), "--effect", "es", "--variance", "es_var", "--moderators", "latitude_abs",
               "--nested", "study", "--cluster", "study", "--permutations", "30", "--seed", "3",
               "--json", str(out)])
    assert rc == 0
    got = json.loads(out.read_text())
    assert set(got["variance_components"]) == {"between_study", "within_study"}
    assert got["moderator_test"]["permutation"]["seed"] == 3
    assert all("df" in c for c in got["coefficients"]["table"])


def test_fit_permutations_and_checks_go_into_the_sections(bcg_csv, tmp_path, capsys):
    # one layout (docs/methods.md, "Result fields"): the permutation tests under
    # moderator_test, each term's p beside its coefficient, the checks under diagnostics
    df = pd.read_csv(bcg_csv)
    df["allocation"] = df["allocation"].str.strip()
    df.to_csv(bcg_csv, index=False)
    out = tmp_path / "x.json"
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--moderators",
                 "latitude_abs + C(allocation)", "--permutations", "200", "--seed", "1", "--diagnostics",
                 "--json", str(out)]) == 0
    text = capsys.readouterr().out
    got = json.loads(out.read_text())
    assert list(got) == list(CONTRACT) and "permutation" not in got
    perm = got["moderator_test"]["permutation"]
    assert list(perm) == ["n_permutations", "seed", "scheme", "engine", "test", "terms", "omnibus",
                          "corrects_for", "notes"]
    assert perm["n_permutations"] == 200 and perm["seed"] == 1 and perm["scheme"] == "rows"
    assert [t["term"] for t in perm["terms"]] == ["latitude_abs", "C(allocation)"]
    assert perm["terms"][0]["label"] == "permutation p for latitude_abs (this model)"
    assert perm["omnibus"]["statistic"] == "Q_M"
    assert perm["omnibus"]["label"].startswith("omnibus permutation p of Q_M")
    for t in perm["terms"]:  # p = (1 + count) / (1 + n): a multiple of 1/201 (common practice)
        assert 1 / 201 <= t["p"] <= 1
        np.testing.assert_allclose(t["p"] * 201, round(t["p"] * 201), atol=1e-9)
    by_term = {r["term"]: r["permutation_p"] for r in got["coefficients"]["table"]}
    assert by_term == {"intercept": None, "latitude_abs": perm["terms"][0]["p"],
                       "C(allocation)[T.random]": None, "C(allocation)[T.systematic]": None}
    small = got["diagnostics"]["small_study"]
    assert small["model"].startswith("REML model, moderators: latitude_abs + C(allocation)")
    assert small["small_study_test"]["term"] == "sqrt(variance)"
    # the text keeps its sections: the permutation p's under the moderator test, a column
    # in the coefficient table, the small-study checks in a Diagnostics section
    moderator_test = text.split("\nModerator test\n")[1].split("\nCoefficients\n")[0]
    assert "permutation p for latitude_abs (this model" in moderator_test
    assert "omnibus permutation p of Q_M" in moderator_test
    table_text = text.split("\nCoefficients\n")[1].split("\nDiagnostics\n")[0]
    assert "perm. p" in table_text
    assert "Egger-type test" in text.split("\nDiagnostics\n")[1]


def test_fit_bad_input_exit_codes(bcg_csv, capsys):
    assert main(["fit", str(bcg_csv), "--effect", "ess", "--variance", "es_var"]) == 2
    assert "Did you mean 'es'" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--moderators", "latitude_abs + "]) == 2
    assert "Cannot parse the moderator formula" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--moderators", "latitude_abs + I(2 * latitude_abs)"]) == 1
    assert "collinear" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--method", "XX"]) == 2


def test_too_few_usable_rows_is_bad_input_exit_2(bcg_csv, tmp_path, capsys):
    # Checks against the exit codes of `envlink fit --help` and README.md: too few usable
    # rows for the model is a property of the data (bad input, exit 2), as in a project
    # run (tests/test_project.py); the API raises TooFewRowsError, also a ModelError.
    from envlink.errors import InputError, ModelError, TooFewRowsError

    two = tmp_path / "two.csv"
    pd.read_csv(bcg_csv).iloc[:2].to_csv(two, index=False)
    assert main(["fit", str(two), "--effect", "es", "--variance", "es_var", "--moderators", "latitude_abs"]) == 2
    err = capsys.readouterr().err
    assert "envlink fit: error: Only k = 2 usable effects for p = 2 coefficients" in err
    one = tmp_path / "one.csv"
    pd.read_csv(bcg_csv).iloc[:1].to_csv(one, index=False)
    assert main(["fit", str(one), "--effect", "es", "--variance", "es_var"]) == 2
    with pytest.raises(TooFewRowsError) as info:
        MetaRegression().fit(pd.read_csv(one), effect="es", variance="es_var")
    assert isinstance(info.value, ModelError) and isinstance(info.value, InputError)


def _text_copy(path, cells=None):
    """The BCG table as a semicolon CSV, with latitude_abs written with decimal commas
    (common practice in European spreadsheets) and selected cells overwritten."""
    df = table()
    df["lat_txt"] = [f"{a + 0.5:.1f}".replace(".", ",") for a in df["latitude_abs"]]
    df["allocation"] = [f" {a}  " if i % 3 == 0 else a for i, a in enumerate(df["allocation"])]
    for (row, col), value in (cells or {}).items():
        df[col] = df[col].astype(object)
        df.loc[row, col] = value
    df.to_csv(path, index=False, sep=";")
    return path


def test_fit_json_path_is_checked_before_any_work(tmp_path, capsys):
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    missing_table = str(tmp_path / "no-such-table.csv")  # never read: the path is checked first
    for out, why in [(tmp_path, r"it is a folder; give a file name inside it, e\.g\. '.*result\.json'"),
                     (plain / "fit.json", r"cannot create a file in '.*plain\.txt'"),
                     (tmp_path / "fit.txt", r"unknown extension '\.txt'; expected \.json")]:
        rc = main(["fit", missing_table, "--effect", "es", "--variance", "es_var", "--json", str(out)])
        cap = capsys.readouterr()
        assert rc == 2 and cap.out == ""
        assert re.search(why, cap.err) and "unexpected error" not in cap.err and "no such file" not in cap.err


def test_fit_reads_numbers_written_as_text(tmp_path, capsys):
    # "44,5" is 44.5 (decimal comma); "\u22121,5" is -1.5 (U+2212 MINUS SIGN, Unicode 15 ch. 6.2)
    p = _text_copy(tmp_path / "t.csv", {(3, "es"): str(table()["es"][3]).replace("-", "\u2212")})
    out = tmp_path / "f.json"
    assert main(["fit", str(p), "--effect", "es", "--variance", "es_var", "--moderators",
                 "lat_txt + C(allocation)", "--json", str(out)]) == 0
    got = json.loads(out.read_text())
    ref_df = table().assign(lat_txt=table()["latitude_abs"] + 0.5)
    ref = MetaRegression(moderators="lat_txt + C(allocation)").fit(ref_df, effect="es", variance="es_var")
    rows = got["coefficients"]["table"]
    assert [c["term"] for c in rows] == ref.terms_  # white space is not a level
    assert ref.terms_ == ["intercept", "lat_txt", "C(allocation)[T.random]", "C(allocation)[T.systematic]"]
    np.testing.assert_allclose([c["estimate"] for c in rows], ref.coef_, rtol=1e-9)


def test_fit_text_in_a_number_column_names_row_and_value(tmp_path, capsys):
    # the fifth data row is row 5: rows count from 1, as everywhere in envlink
    p = _text_copy(tmp_path / "t.csv", {(4, "lat_txt"): "approx. 5"})
    rc = main(["fit", str(p), "--effect", "es", "--variance", "es_var", "--moderators", "lat_txt"])
    err = capsys.readouterr().err
    assert rc == 2
    assert ("--moderators: the column 'lat_txt' holds numbers, but row 5 'approx. 5' is not a "
            "number. Write a number or leave the cell blank; write C(lat_txt) in --moderators "
            "if the column is a category.") in err
    q = _text_copy(tmp_path / "q.csv", {(1, "es_var"): "0,02?"})
    assert main(["fit", str(q), "--effect", "es", "--variance", "es_var"]) == 2
    assert "--variance: the column 'es_var' must hold numbers, but row 2 '0,02?' is not a number" in (
        capsys.readouterr().err)
    # as a category the column is the user's choice: one level per value, no error
    r = _text_copy(tmp_path / "r.csv", {(4, "lat_txt"): "approx. 5"})
    r_df = pd.read_csv(r, sep=";").iloc[:6]
    r_df.to_csv(r, sep=";", index=False)
    assert main(["fit", str(r), "--effect", "es", "--variance", "es_var", "--method", "DL",
                 "--moderators", "C(lat_txt, Treatment('44,5'))"]) == 0
    assert "T.approx. 5" in capsys.readouterr().out


def test_fit_dropped_rows_are_data_rows_counted_from_1(tmp_path, capsys):
    p = _text_copy(tmp_path / "t.csv", {(0, "lat_txt"): "", (7, "es_var"): "n/a", (12, "allocation"): " "})
    assert main(["fit", str(p), "--effect", "es", "--variance", "es_var",
                 "--moderators", "lat_txt + C(allocation)"]) == 0
    err = capsys.readouterr().err
    assert "3 row(s) dropped for missing effect, variance or moderator values (rows 1, 8, 13)." in err


def test_fit_typed_tables_keep_their_types(tmp_path, capsys):
    df = table()
    df["lat_txt"] = [f"{a:.1f}".replace(".", ",") for a in df["latitude_abs"]]  # text in a typed file
    ref = MetaRegression(moderators="latitude_abs + year").fit(df, effect="es", variance="es_var")
    for name in ("t.parquet", "t.xlsx"):
        path = tmp_path / name
        df.to_parquet(path) if name.endswith("parquet") else df.to_excel(path, index=False)
        out = tmp_path / f"{name}.json"
        assert main(["fit", str(path), "--effect", "es", "--variance", "es_var", "--moderators",
                     "latitude_abs + year", "--json", str(out)]) == 0
        got = json.loads(out.read_text())
        rows = got["coefficients"]["table"]
        np.testing.assert_allclose([c["estimate"] for c in rows], ref.coef_, rtol=1e-9)
        assert main(["fit", str(path), "--effect", "es", "--variance", "es_var", "--moderators",
                     "lat_txt", "--json", str(out), "--force"]) == 0  # replacing needs --force
        rows = json.loads(out.read_text())["coefficients"]["table"]
        assert [c["term"] for c in rows] == ["intercept", "lat_txt"]
    capsys.readouterr()


def test_fit_formula_errors_are_plain_text(bcg_csv, capsys):
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--moderators", "latitude_abs + C(allocation"]) == 2
    err = capsys.readouterr().err
    assert "\x1b" not in err and "\u29db" not in err and "\u29da" not in err
    assert "Cannot parse the moderator formula 'latitude_abs + C(allocation': at character 16 ('C(allocation')" in err
    assert "\n    latitude_abs + C(allocation\n" + " " * 19 + "^" * 12 + "\n" in err
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--moderators", "es ~ latitude_abs"]) == 2
    assert "right-hand side only" in capsys.readouterr().err


def test_fit_diagnostics_and_influence(bcg_csv, tmp_path, capsys):
    # The wiring of the model checks into `envlink fit`: the numbers must equal the
    # functions' own (each checked against its reference in test_bias.py and
    # test_influence.py) on the rows the model used.
    from envlink.metareg.bias import small_study_test
    from envlink.metareg.diagnostics import fail_safe_n

    out, infl = tmp_path / "fit.json", tmp_path / "influence.csv"
    rc = main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--moderators", "latitude_abs",
               "--diagnostics", "--effect-kind", "log_risk_ratio", "--influence", str(infl),
               "--label", "trial", "--json", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "Egger-type test, sqrt(variance) added to this model" in text
    assert "Fail-safe N (Rosenthal 1979; null tested: effect 0 (no difference))" in text
    assert "Trim-and-fill not run: it has no form with moderators or nesting" in text
    got = json.loads(out.read_text())["diagnostics"]["small_study"]
    t = table()
    y, v = t["es"].to_numpy(), t["es_var"].to_numpy()
    ref = MetaRegression(moderators="latitude_abs").fit(t, effect="es", variance="es_var")
    assert got["model"] == "REML model, moderators: latitude_abs, z tests"
    np.testing.assert_allclose(got["small_study_test"]["estimate"],
                               small_study_test(ref).estimate, rtol=1e-12)
    assert got["fail_safe_n"] == fail_safe_n(y, v) and got["trim_and_fill"] is None
    rows = pd.read_csv(infl)
    assert len(rows) == 13 and rows["row"].tolist() == list(range(1, 14))
    assert list(rows.columns[:3]) == ["row", "trial", "dropped"]  # each row carries its label
    assert rows["trial"].tolist() == t["trial"].tolist()
    np.testing.assert_allclose(rows["cooks_distance"], ref.cooks_distance(), rtol=1e-10)
    np.testing.assert_allclose(rows["standardized_residual"], ref.standardized_residuals()["z"],
                               rtol=1e-10)
    np.testing.assert_allclose(rows["loo_latitude_abs"], ref.leave_one_out()["latitude_abs"], rtol=1e-10)


def test_fit_checks_for_one_group_proportions_and_space(bcg_csv, tmp_path, capsys):
    import pandas as pd

    t = pd.read_csv(bcg_csv)
    t["site_lat"] = t["latitude_abs"].astype(float) * np.where(np.arange(len(t)) % 2, 1.0, -1.0)
    t["site_lon"] = np.linspace(-60.0, 60.0, len(t))
    path = tmp_path / "bcg_sites.csv"
    t.to_csv(path, index=False)
    out = tmp_path / "fit.json"
    rc = main(["fit", str(path), "--effect", "es", "--variance", "es_var", "--diagnostics",
               "--effect-kind", "Logit_Proportion", "--spatial", "knn:3", "--seed", "2",
               "--json", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "Fail-safe N: not given (no null effect is meaningful" in text
    assert "funnel is asymmetric by construction" in text
    got = json.loads(out.read_text())["diagnostics"]
    assert got["small_study"]["fail_safe_n"] is None
    assert got["small_study"]["trim_and_fill"]["k0"] >= 0  # intercept-only: trim-and-fill runs
    assert got["spatial"]["moran"]["weights"] == "knn:3" and got["spatial"]["moran"]["n"] == 13
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--spatial",
                 "knn:3"]) == 2
    assert "--spatial needs the columns site_lat, site_lon" in capsys.readouterr().err


def test_fit_influence_path_checked_first(bcg_csv, tmp_path, capsys):
    rc = main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
               "--influence", str(tmp_path)])
    assert rc == 2
    err = capsys.readouterr()
    assert "it is a folder" in err.err and str(tmp_path) in err.err
    assert err.out == ""  # refused before any fitting


def test_permutation_options_a_model_cannot_take_are_bad_usage(bcg_csv, capsys) -> None:
    # exit codes (envlink/cli.py): a permutation test of a model without moderators, and a
    # scheme that needs nested groups on a model without them, are usage errors (2), not
    # failed runs (1); in Python they stay ModelErrors too
    from envlink.errors import ModelError, ModelOptionError

    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var",
                 "--permutations", "50"]) == 2
    assert "error: A permutation test needs at least one moderator" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "es", "--variance", "es_var", "--moderators",
                 "latitude_abs", "--permutations", "50", "--permute", "within"]) == 2
    assert "rearranges rows within" in capsys.readouterr().err
    assert issubclass(ModelOptionError, ModelError)
