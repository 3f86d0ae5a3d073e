"""``envlink fit`` end to end: the JSON contract of DESIGN.md §4, exit codes, messages."""

from __future__ import annotations

import json

import numpy as np
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
