"""The whole job from the command line alone, to a full report: project runs and plain tables.

A practitioner who never writes Python: ``envlink run`` / ``envlink report`` for a
project with a categorical moderator, and ``sites -> effects -> fit --report
--figures`` for a plain table. The figures are counted in the page (embedded PNGs);
the numbers are checked against the API (the stage itself) on the same rows.
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

# invented surveys: a text column (method) sits before the numeric moderator (depth)
STUDIES = """study,method,lat,lon,when,sick,seen,depth
A,transect,-9.51,-117.20,March 2008,12,80,3
A,quadrat,-9.62,-117.31,Apr-May 2008,20,90,9
B,photo,9°30'S,117°15'W,2009-02-01/2009-02-20,5,60,4
B,transect,-8.10,-116.90,austral summer 2010/11,30,120,12
C,quadrat,-10.20,-118.00,June 2011,9,75,6
C,photo,-10.40,-118.20,July 2011,14,70,2
D,transect,-9.90,-117.80,May 2012,25,95,10
D,quadrat,-9.70,-117.60,June 2012,8,85,5
E,photo,-9.30,-117.40,March 2013,11,65,7
E,transect,-95.00,-118.00,June 2011,9,75,6
"""

PROJECT = """\
[project]
title = "categorical moderator"
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
moderators = "method + depth"
method = "DL"
[export]
formats = ["csv"]
report = true
"""


def _figures(path: Path) -> int:
    return path.read_text(encoding="utf-8").count("data:image/png;base64,")


@pytest.fixture
def project(tmp_path: Path) -> Path:
    (tmp_path / "studies.csv").write_text(STUDIES, encoding="utf-8")
    p = tmp_path / "p.toml"
    p.write_text(PROJECT, encoding="utf-8")
    return p


def test_project_with_a_categorical_moderator_to_a_full_report(project, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(project), "--out", str(out), "--no-progress"]) == 0
    # the run's own report: site map + bubble, forest, funnel, residuals
    assert _figures(out / "report.html") == 5
    assert "against depth, the first numeric term of the model" in (out / "report.html").read_text()
    report, figs = tmp_path / "again.html", tmp_path / "figs"
    assert main(["report", str(out), "-o", str(report), "--figures", str(figs)]) == 0
    page = report.read_text(encoding="utf-8")
    assert _figures(report) == 5 and "categorical moderator" in page
    assert sorted(p.name for p in figs.iterdir()) == ["bubble.png", "forest.png", "funnel.png",
                                                     "residuals.png"]
    # the report refits what the run recorded: the same coefficients as the run's fit.json
    run_fit = json.loads((out / "fit.json").read_text())["coefficients"]["table"]
    table = envlink.read_table(out / "enriched.csv")
    used = table[table["fit_included"]]
    direct = envlink.MetaRegression(moderators="method + depth", method="DL").fit(used)
    np.testing.assert_allclose([c["estimate"] for c in run_fit], direct.coef_, rtol=1e-10)
    capsys.readouterr()


def test_report_of_a_run_quotes_its_permutation_tests(project, tmp_path, capsys):
    # the run's permutation tests (recorded in its provenance) reach `envlink report` too
    project.write_text(PROJECT.replace('method = "DL"', 'method = "DL"\npermutations = 19\nseed = 1'),
                       encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(project), "--out", str(out), "--no-progress"]) == 0
    perm = json.loads((out / "fit.json").read_text())["moderator_test"]["permutation"]
    report = tmp_path / "again.html"
    assert main(["report", str(out), "-o", str(report)]) == 0
    for page in (report.read_text(encoding="utf-8"), (out / "report.html").read_text()):
        assert f"omnibus permutation p of Q_M (this model) = {perm['omnibus']['p']:.4g}" in page
        assert "permutation p (this model)" in page and "What was corrected, and how" in page
    capsys.readouterr()


def test_plain_table_to_figures_from_the_command_line(tmp_path, capsys):
    (tmp_path / "studies.csv").write_text(STUDIES, encoding="utf-8")
    located, effects = tmp_path / "located.csv", tmp_path / "effects.csv"
    assert main(["sites", str(tmp_path / "studies.csv"), "-o", str(located), "--lat", "lat",
                 "--lon", "lon", "--period", "when"]) == 0
    assert main(["effects", str(located), "--kind", "logit_proportion", "--events", "sick",
                 "--total", "seen", "-o", str(effects)]) == 0
    report, figs = tmp_path / "fit.html", tmp_path / "figs"
    assert main(["fit", str(effects), "--effect", "effect", "--variance", "variance",
                 "--moderators", "method + depth", "--report", str(report), "--figures", str(figs),
                 "--label", "study", "--forest-order", "label"]) == 0
    assert _figures(report) == 5  # site map + the four model figures
    assert len(list(figs.glob("*.png"))) == 4
    page = report.read_text(encoding="utf-8")
    assert "labelled by study" in page and "ordered: by the label column" in page
    # envlink report on the same table gives the same model section
    again = tmp_path / "report.html"
    assert main(["report", str(effects), "--effect", "effect", "--variance", "variance",
                 "--moderators", "method + depth", "-o", str(again)]) == 0
    assert _figures(again) == 5
    section = re.compile(r"<h2>Meta-regression</h2>(.*?)<h2>", re.DOTALL)
    assert section.search(page).group(1) == section.search(again.read_text()).group(1)
    capsys.readouterr()
    # --figures follows the output rule of every command (common practice): figures already
    # in the folder are replaced only with --force, and a file is not a folder (exit 2)
    before = {p.name: p.read_bytes() for p in figs.glob("*.png")}
    fit = ["fit", str(effects), "--effect", "effect", "--variance", "variance", "--moderators",
           "method + depth"]
    for cmd in ([*fit, "--figures", str(figs)],
                ["report", str(effects), "--effect", "effect", "--variance", "variance", "-o",
                 str(tmp_path / "r2.html"), "--figures", str(figs)]):
        assert main(cmd) == 2
        err = capsys.readouterr().err
        assert "already holds bubble.png, forest.png" in err and "--force" in err
        assert {p.name: p.read_bytes() for p in figs.glob("*.png")} == before
    assert main([*fit, "--figures", str(effects)]) == 2
    assert "is a file; give a folder" in capsys.readouterr().err
    assert main([*fit, "--figures", str(figs), "--force"]) == 0
    capsys.readouterr()


def test_report_refuses_what_it_cannot_use(tmp_path, capsys):
    (tmp_path / "t.csv").write_text("effect,variance\n0.1,0.01\n0.2,0.02\n0.3,0.01\n")
    rc = main(["report", str(tmp_path), "-o", str(tmp_path / "r.html")])
    assert rc == 2 and "without datapackage.json" in capsys.readouterr().err
    rc = main(["report", str(tmp_path / "t.csv"), "-o", str(tmp_path / "r.html")])
    assert rc == 2 and "needs --effect and --variance" in capsys.readouterr().err
    rc = main(["report", str(tmp_path / "t.csv"), "--effect", "effect", "--variance", "variance",
               "-o", str(tmp_path / "r.txt")])
    assert rc == 2 and "expected .html" in capsys.readouterr().err
    rc = main(["report", str(tmp_path / "t.csv"), "--effect", "effect", "--variance", "variance",
               "--forest-order", "size", "-o", str(tmp_path / "r.html")])
    err = capsys.readouterr().err
    assert rc == 2 and "--forest-order" in err and "'effect', 'precision'" in err
    assert not (tmp_path / "r.html").exists()


def test_report_of_a_pooled_effect_has_no_bubble_and_says_so(tmp_path, capsys):
    t = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.6], "variance": [0.04, 0.05, 0.03, 0.06, 0.05]})
    t.to_csv(tmp_path / "t.csv", index=False)
    out = tmp_path / "r.html"
    assert main(["report", str(tmp_path / "t.csv"), "--effect", "effect", "--variance", "variance",
                 "-o", str(out)]) == 0
    page = out.read_text(encoding="utf-8")
    assert _figures(out) == 3 and "No bubble plot: the model has no moderators" in page
    assert "pooled effect" in page
    capsys.readouterr()
