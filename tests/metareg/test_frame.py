"""One model frame: the project run, ``envlink fit`` and a direct call fit the same rows.

The studies below are invented for this test. Which rows are left out follows the
rules stated in ``envlink.metareg.frame`` (written out row by row in ``EXPECTED``):
a row rejected by locate, an effect that cannot be computed (a blank count, more
events than animals: NaN by the effect-size rules), a blank category of the
moderator, a blank nested label and a blank cluster label. No numeric result is
checked here, only which rows enter the fit.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import envlink
from envlink.cli import main
from envlink.errors import InvalidValueError, ModelError
from envlink.metareg.frame import model_frame, read_model_columns
from envlink.tables import read_table_as_written

STUDIES = """study,lat,lon,when,sick,seen,zone,region
A,-9.51,-117.20,March 2008,12,80,reef,N
A,-9.62,-117.31,Apr-May 2008,20,90,flat,N
B,-9.40,-117.25,2009-02-01/2009-02-20,5,60,reef,N
B,-8.10,-116.90,June 2010,30,120,flat,N
C,-10.20,-118.00,June 2011,9,75,reef,S
C,-10.30,-118.10,July 2011,14,70,flat,S
D,-10.50,-118.20,May 2012,7,66,reef,S
D,-10.60,-118.30,May 2012,25,95,flat,S
E,-95.00,-118.00,June 2011,9,75,reef,S
E,-10.70,-118.40,June 2013,,80,reef,S
F,-10.80,-118.50,June 2013,50,40,flat,S
F,-10.90,-118.60,June 2013,11,70,,S
,-11.00,-118.70,June 2013,13,70,reef,S
G,-11.10,-118.80,June 2013,15,70,flat,
G,-11.20,-118.90,August 2014,16,85,reef,N
H,-9.00,-117.00,September 2014,10,90,flat,W
H,-9.10,-117.10,October 2014,18,88,reef,W
"""
#: rows 9-14 (counted from 1): rejected, blank count, events > total, blank zone,
#: blank study, blank region
EXPECTED = [True] * 8 + [False] * 6 + [True] * 3

PROJECT = """\
[studies]
path = "studies.csv"
study = "study"

[locate]
lat = "lat"
lon = "lon"
period = "when"

[effects]
kind = "logit_proportion"

[effects.columns]
events = "sick"
total = "seen"

[model]
moderators = "C(zone)"
method = "reml"
nested = "study"
cluster = "region"

[export]
formats = ["csv"]
report = false
"""
OPTIONS = {"effect": "effect", "variance": "variance", "moderators": "C(zone)",
           "nested": "study", "cluster": "region"}


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, pd.DataFrame]:
    folder = tmp_path_factory.mktemp("frame")
    (folder / "studies.csv").write_text(STUDIES)
    (folder / "p.toml").write_text(PROJECT)
    result = envlink.run_project(folder / "p.toml", progress=False)
    return folder / "envlink-out" / "enriched.csv", result.table


def _cli_included(csv: Path, tmp: Path) -> list[bool]:
    influence = tmp / "influence.csv"
    assert main(["fit", str(csv), "--effect", "effect", "--variance", "variance",
                 "--moderators", "C(zone)", "--nested", "study", "--cluster", "region",
                 "--influence", str(influence), "--json", str(tmp / "fit.json")]) == 0
    dropped = pd.read_csv(influence)["dropped"].astype(str).str.lower() == "true"
    return (~dropped).tolist()


def _direct(table: pd.DataFrame) -> list[bool]:
    data = read_model_columns(table, **OPTIONS)
    return model_frame(data, **OPTIONS, skip_rejected=True).included.tolist()


def test_project_cli_and_direct_call_fit_the_same_rows(run, tmp_path: Path) -> None:
    csv, table = run
    assert table["fit_included"].tolist() == EXPECTED
    assert _cli_included(csv, tmp_path) == EXPECTED
    assert _direct(read_table_as_written(csv)) == EXPECTED
    assert _direct(table) == EXPECTED
    fit = json.loads((tmp_path / "fit.json").read_text())
    assert fit["model"]["effects_used"] == sum(EXPECTED)
    project_fit = json.loads((csv.parent / "fit.json").read_text())
    assert project_fit["model"]["effects_used"] == sum(EXPECTED)
    assert project_fit["model"]["tau2_method"] == fit["model"]["tau2_method"] == "REML"


def test_blank_effects_are_left_out_alike(run, tmp_path: Path) -> None:
    csv, _ = run
    text = read_table_as_written(csv)
    text.loc[0, "effect"] = ""
    text.loc[1, "effect"] = "NaN"
    text.loc[2, "variance"] = ""
    edited = tmp_path / "edited.csv"
    text.to_csv(edited, index=False)
    expected = [False] * 3 + EXPECTED[3:]
    assert _cli_included(edited, tmp_path) == expected
    assert _direct(read_table_as_written(edited)) == expected
    typed = read_model_columns(read_table_as_written(edited), **OPTIONS)
    frame = model_frame(typed, **OPTIONS, skip_rejected=True)
    m = envlink.MetaRegression(moderators="C(zone)", nested="study", cluster="region")
    with pytest.warns(envlink.metareg.MetaRegressionWarning,
                      match=r"9 row\(s\) dropped for rejection by locate or missing effect"):
        m.fit(frame)
    assert m.included_.tolist() == expected
    assert frame.lacking["effect"][:2].tolist() == [True, True]
    assert frame.lacking["variance"][2]


@pytest.mark.parametrize("column, value, row", [("effect", "inf", 1), ("effect", "-inf", 2),
                                                ("variance", "inf", 3), ("variance", "0", 4),
                                                ("variance", "-0.5", 5)])
def test_infinite_effects_and_bad_variances_are_refused_alike(run, tmp_path: Path, capsys, column,
                                                              value, row) -> None:
    # a blank cell is missing (left out); an infinite effect or a variance that is zero,
    # negative or infinite is an invalid value: bad input (exit 2) naming the row, everywhere
    csv, _ = run
    text = read_table_as_written(csv)
    text.loc[row - 1, column] = value
    edited = tmp_path / "edited.csv"
    text.to_csv(edited, index=False)
    assert main(["fit", str(edited), "--effect", "effect", "--variance", "variance",
                 "--moderators", "C(zone)", "--nested", "study"]) == 2
    assert re.search(rf"error: .*'{column}' must be .*row {row} has", capsys.readouterr().err)
    typed = read_model_columns(read_table_as_written(edited), **OPTIONS)
    with pytest.raises(InvalidValueError, match=rf"row {row} has"):
        model_frame(typed, **OPTIONS, skip_rejected=True)


def test_plain_fit_keeps_rejected_rows_and_names_dropped_ones(run) -> None:
    # MetaRegression.fit(table) uses the rows as given: locate's verdict is the run's business
    _, table = run
    data = read_model_columns(table, **OPTIONS)
    with pytest.warns(envlink.metareg.MetaRegressionWarning,
                      match=r"5 row\(s\) dropped for missing effect, variance or moderator values "
                            r"\(rows 10, 11, 12, 13, 14\)\.$"):
        m = envlink.MetaRegression(moderators="C(zone)", nested="study", cluster="region").fit(
            data, effect="effect", variance="variance")
    assert m.included_.tolist() == EXPECTED[:8] + [True] + EXPECTED[9:]


def test_non_positive_variance_is_an_error_naming_the_row() -> None:
    t = pd.DataFrame({"effect": [0.1, 0.2, 0.3, 0.4], "variance": [0.1, 0.0, np.nan, 0.1]})
    with pytest.raises(ModelError, match=r"'variance' must be positive and finite; row 2 has 0\.0"):
        model_frame(t)
