"""``envlink fit`` end to end: the JSON contract of DESIGN.md §4, exit codes, messages."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest
from reference.bcg import table

from envlink.cli import main
from envlink.metareg import MetaRegression

CONTRACT = ["method", "k", "p", "tau2", "tau2_ci", "I2", "H2", "R2", "Q_E", "Q_E_df", "Q_E_p",
            "Q_M", "Q_M_df", "Q_M_p", "test", "df", "coefficients", "variance_components",
            "converged", "iterations", "warnings"]


@pytest.fixture
def bcg_csv(tmp_path):
    p = tmp_path / "bcg.csv"
    df = table()
    df["study"] = [f"s{i // 2}" for i in range(13)]
    df.to_csv(p, index=False)
    return p


def test_fit_json_contract(bcg_csv, tmp_path, capsys):
    out = tmp_path / "fit.json"
    rc = main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi", "--moderators", "ablat",
               "--test", "knapp-hartung", "--json", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "ablat" in text and "Q_E" in text
    got = json.loads(out.read_text())
    assert list(got) == CONTRACT
    assert got["test"] == "t" and got["df"] == 11
    assert [c["term"] for c in got["coefficients"]] == ["intercept", "ablat"]
    assert set(got["coefficients"][0]) == {"term", "estimate", "se", "statistic", "p", "ci_low",
                                           "ci_high", "df"}
    ref = MetaRegression(moderators="ablat", test="knapp-hartung").fit(table(), effect="yi",
                                                                      variance="vi")
    np.testing.assert_allclose(got["tau2"], ref.tau2_, rtol=1e-12)
    assert got == json.loads(json.dumps(ref.to_dict()))


def test_fit_nested_cluster_parquet_and_permutations(bcg_csv, tmp_path, capsys):
    import pandas as pd

    pq = tmp_path / "bcg.parquet"
    pd.read_csv(bcg_csv).to_parquet(pq)
    out = tmp_path / "f.json"
    rc = main(["fit", str(pq), "--effect", "yi", "--variance", "vi", "--moderators", "ablat",
               "--nested", "study", "--cluster", "study", "--permutations", "30", "--seed", "3",
               "--json", str(out)])
    assert rc == 0
    got = json.loads(out.read_text())
    assert set(got["variance_components"]) == {"between_study", "within_study"}
    assert got["permutation"]["seed"] == 3
    assert all("df" in c for c in got["coefficients"])


def test_fit_bad_input_exit_codes(bcg_csv, capsys):
    assert main(["fit", str(bcg_csv), "--effect", "yii", "--variance", "vi"]) == 2
    assert "Did you mean 'yi'" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi",
                 "--moderators", "ablat + "]) == 2
    assert "Cannot parse the moderator formula" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi",
                 "--moderators", "ablat + I(2 * ablat)"]) == 1
    assert "collinear" in capsys.readouterr().err
    assert main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi", "--method", "XX"]) == 2


def _text_copy(path, cells=None):
    """The BCG table as a semicolon CSV, with ablat written with decimal commas
    (common practice in European spreadsheets) and selected cells overwritten."""
    df = table()
    df["ablat_txt"] = [f"{a + 0.5:.1f}".replace(".", ",") for a in df["ablat"]]
    df["alloc"] = [f" {a}  " if i % 3 == 0 else a for i, a in enumerate(df["alloc"])]
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
        rc = main(["fit", missing_table, "--effect", "yi", "--variance", "vi", "--json", str(out)])
        cap = capsys.readouterr()
        assert rc == 2 and cap.out == ""
        assert re.search(why, cap.err) and "unexpected error" not in cap.err and "no such file" not in cap.err


def test_fit_reads_numbers_written_as_text(tmp_path, capsys):
    # "44,5" is 44.5 (decimal comma); "\u22121,5" is -1.5 (U+2212 MINUS SIGN, Unicode 15 ch. 6.2)
    p = _text_copy(tmp_path / "t.csv", {(3, "yi"): str(table()["yi"][3]).replace("-", "\u2212")})
    out = tmp_path / "f.json"
    assert main(["fit", str(p), "--effect", "yi", "--variance", "vi", "--moderators",
                 "ablat_txt + C(alloc)", "--json", str(out)]) == 0
    got = json.loads(out.read_text())
    ref_df = table().assign(ablat_txt=table()["ablat"] + 0.5)
    ref = MetaRegression(moderators="ablat_txt + C(alloc)").fit(ref_df, effect="yi", variance="vi")
    assert [c["term"] for c in got["coefficients"]] == ref.terms_  # white space is not a level
    assert ref.terms_ == ["intercept", "ablat_txt", "C(alloc)[T.random]", "C(alloc)[T.systematic]"]
    np.testing.assert_allclose([c["estimate"] for c in got["coefficients"]], ref.coef_, rtol=1e-9)


def test_fit_text_in_a_number_column_names_row_and_value(tmp_path, capsys):
    # the fifth data row is row 5: rows count from 1, as everywhere in envlink
    p = _text_copy(tmp_path / "t.csv", {(4, "ablat_txt"): "approx. 5"})
    rc = main(["fit", str(p), "--effect", "yi", "--variance", "vi", "--moderators", "ablat_txt"])
    err = capsys.readouterr().err
    assert rc == 2
    assert ("--moderators: the column 'ablat_txt' holds numbers, but row 5 'approx. 5' is not a "
            "number. Write a number or leave the cell blank; write C(ablat_txt) in --moderators "
            "if the column is a category.") in err
    q = _text_copy(tmp_path / "q.csv", {(1, "vi"): "0,02?"})
    assert main(["fit", str(q), "--effect", "yi", "--variance", "vi"]) == 2
    assert "--variance: the column 'vi' must hold numbers, but row 2 '0,02?' is not a number" in (
        capsys.readouterr().err)
    # as a category the column is the user's choice: one level per value, no error
    r = _text_copy(tmp_path / "r.csv", {(4, "ablat_txt"): "approx. 5"})
    r_df = pd.read_csv(r, sep=";").iloc[:6]
    r_df.to_csv(r, sep=";", index=False)
    assert main(["fit", str(r), "--effect", "yi", "--variance", "vi", "--method", "DL",
                 "--moderators", "C(ablat_txt, Treatment('44,5'))"]) == 0
    assert "T.approx. 5" in capsys.readouterr().out


def test_fit_dropped_rows_are_data_rows_counted_from_1(tmp_path, capsys):
    p = _text_copy(tmp_path / "t.csv", {(0, "ablat_txt"): "", (7, "vi"): "n/a", (12, "alloc"): " "})
    assert main(["fit", str(p), "--effect", "yi", "--variance", "vi",
                 "--moderators", "ablat_txt + C(alloc)"]) == 0
    err = capsys.readouterr().err
    assert "3 row(s) dropped for missing effect, variance or moderator values (rows 1, 8, 13)." in err


def test_fit_typed_tables_keep_their_types(tmp_path, capsys):
    df = table()
    df["ablat_txt"] = [f"{a:.1f}".replace(".", ",") for a in df["ablat"]]  # text in a typed file
    ref = MetaRegression(moderators="ablat + year").fit(df, effect="yi", variance="vi")
    for name in ("t.parquet", "t.xlsx"):
        path = tmp_path / name
        df.to_parquet(path) if name.endswith("parquet") else df.to_excel(path, index=False)
        out = tmp_path / f"{name}.json"
        assert main(["fit", str(path), "--effect", "yi", "--variance", "vi", "--moderators",
                     "ablat + year", "--json", str(out)]) == 0
        got = json.loads(out.read_text())
        np.testing.assert_allclose([c["estimate"] for c in got["coefficients"]], ref.coef_, rtol=1e-9)
        assert main(["fit", str(path), "--effect", "yi", "--variance", "vi", "--moderators",
                     "ablat_txt", "--json", str(out)]) == 0
        assert [c["term"] for c in json.loads(out.read_text())["coefficients"]] == ["intercept", "ablat_txt"]
    capsys.readouterr()


def test_fit_formula_errors_are_plain_text(bcg_csv, capsys):
    assert main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi",
                 "--moderators", "ablat + C(alloc"]) == 2
    err = capsys.readouterr().err
    assert "\x1b" not in err and "\u29db" not in err and "\u29da" not in err
    assert "Cannot parse the moderator formula 'ablat + C(alloc': at character 9 ('C(alloc')" in err
    assert "\n    ablat + C(alloc\n            ^^^^^^^\n" in err
    assert main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi",
                 "--moderators", "yi ~ ablat"]) == 2
    assert "right-hand side only" in capsys.readouterr().err


def test_fit_diagnostics_and_influence(bcg_csv, tmp_path, capsys):
    # The wiring of the diagnostics into `envlink fit`: the numbers must equal the
    # functions' own (each checked against its reference in test_diagnostics.py and
    # test_influence.py) on the rows the model used.
    from envlink.metareg.diagnostics import egger_test, fail_safe_n, trim_and_fill

    out, infl = tmp_path / "fit.json", tmp_path / "influence.csv"
    rc = main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi", "--moderators", "ablat",
               "--diagnostics", "--influence", str(infl), "--json", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "Egger's test" in text and "Trim-and-fill" in text and "Fail-safe N" in text
    got = json.loads(out.read_text())["diagnostics"]
    t = table()
    y, v = t["yi"].to_numpy(), t["vi"].to_numpy()
    assert got["k"] == 13
    np.testing.assert_allclose(got["egger"]["intercept"], egger_test(y, v).intercept, rtol=1e-12)
    assert got["trim_and_fill"]["k0"] == trim_and_fill(y, v).k0
    assert got["fail_safe_n"] == fail_safe_n(y, v)
    ref = MetaRegression(moderators="ablat").fit(t, effect="yi", variance="vi")
    rows = pd.read_csv(infl)
    assert len(rows) == 13 and rows["row"].tolist() == list(range(1, 14))
    np.testing.assert_allclose(rows["cooks_distance"], ref.cooks_distance(), rtol=1e-10)
    np.testing.assert_allclose(rows["standardized_residual"], ref.standardized_residuals()["z"],
                               rtol=1e-10)
    np.testing.assert_allclose(rows["loo_ablat"], ref.leave_one_out()["ablat"], rtol=1e-10)


def test_fit_influence_path_checked_first(bcg_csv, tmp_path, capsys):
    rc = main(["fit", str(bcg_csv), "--effect", "yi", "--variance", "vi",
               "--influence", str(tmp_path)])
    assert rc == 2
    err = capsys.readouterr()
    assert "it is a folder" in err.err and str(tmp_path) in err.err
    assert err.out == ""  # refused before any fitting
