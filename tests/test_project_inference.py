"""The honest-inference steps from the project file and the command line, end to end.

Runs the bundled invented demo data with [scan], [imputation] and [checks]; the
numbers are checked in tests/metareg (each against its outside reference), so here
the wiring is checked: what runs, what is written where, and the labels that say
what was corrected (docs/inference.md).
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from envlink.demo_grids import data_path

from envlink import InputError
from envlink.cli import main
from envlink.project import load_project, run_project

PROJECT = f"""\
[project]
title = "inference"

[studies]
path = "{data_path('vell_studies.csv')}"
study = "study_id"

[locate]
lat = "latitude"
lon = "longitude"
coords = "coordinates"
site = "reef"
gazetteer = "{data_path('vell_reefs.gpkg')}"
period = "sampling_period"

[grids.sst]
path = "{data_path('vell_sst_monthly.nc')}"
variable = "sst"

[[covariates]]
name = "sst_anom"
grid = "sst"
stat = "anomaly"
spatial = "nearest-valid:40km"
baseline = "1991-2020"

[effects]
kind = "logit_proportion"

[effects.columns]
events = "diseased"
total = "examined"

[model]
moderators = "sst_anom"
nested = "study_id"
permutations = 49
seed = 2

[scan]
grid = "sst"
lags = "0..1"
spans = "1..2"
unit = "M"
stats = ["anomaly"]
baseline = "1991-2020"
spatial = "nearest-valid:40km"
permutations = 19
seed = 1

[imputation]
draws = 3
seed = 4

[checks]
bias = true
spatial = "knn:4"
spatial_permutations = 49
spatial_effect = true

[export]
formats = ["csv"]
"""


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory):
    folder = tmp_path_factory.mktemp("inference")
    p = folder / "p.toml"
    p.write_text(PROJECT)
    return run_project(p, out=folder / "out", progress=False)


def test_fit_json_has_every_check(run) -> None:
    fit = json.loads(run.paths["fit_json"].read_text())
    # each check in its section of the result (docs/methods.md, "Result fields")
    assert list(fit) == ["format_version", "model", "heterogeneity", "moderator_test",
                         "coefficients", "variance_components", "diagnostics", "scan",
                         "imputation", "warnings"]
    perm = fit["moderator_test"]["permutation"]
    assert perm["terms"][0]["label"] == "permutation p for sst_anom (this model)"
    assert perm["scheme"] == "within"
    rows = fit["coefficients"]["table"]
    assert [r["permutation_p"] for r in rows] == [None, perm["terms"][0]["p"]]
    scan = fit["scan"]
    assert scan["n_windows"] == 4 and scan["family_p_label"] == "family-wise p over 4 windows"
    assert 1 / 20 <= scan["family_p"] <= 1 and len(scan["windows"]) == 4
    imp = fit["imputation"]
    assert imp["draws"] == 3 and imp["pooled"]["coefficients"][1]["term"] == "sst_anom"
    diag = fit["diagnostics"]
    assert diag["small_study"]["fail_safe_n"] is None  # one-group proportions: no null
    assert diag["spatial"]["moran"]["weights"] == "knn:4"
    assert diag["spatial"]["shared_cells"][0]["covariate"] == "sst_anom"
    assert run.windows_tried == 1 + 4


def test_text_report_and_flags_say_what_was_corrected(run) -> None:
    text = run.paths["fit_text"].read_text()
    assert "family-wise p over 4 windows" in text
    assert "permutation p for sst_anom (this model" in text
    assert "Egger-type test, sqrt(variance) added to this model" in text
    # fit.txt keeps the fit's sections; each check's sentences in its own
    sections = [line for line in text.splitlines() if line and not line.startswith((" ", "="))]
    assert sections[1:] == ["The model and its data", "Heterogeneity", "Moderator test",
                            "Coefficients", "Window scan", "Imprecise dates", "Diagnostics",
                            "Notes"][:len(sections) - 1]
    moderator_test = text.split("\nModerator test\n")[1].split("\nCoefficients\n")[0]
    assert "omnibus permutation p of Q_M" in moderator_test
    assert "perm. p" in text.split("\nCoefficients\n")[1].split("\nWindow scan\n")[0]
    diagnostics = text.split("\nDiagnostics\n")[1]
    assert "Egger-type test" in diagnostics and "Moran's I" in diagnostics
    html = run.paths["report"].read_text()
    assert "What was corrected, and how" in html
    assert "The window scan tried 4 windows: family-wise p over 4 windows" in html
    table = pd.read_csv(run.paths["csv"], dtype=str, keep_default_na=False)
    shared = json.loads(run.paths["fit_json"].read_text())["diagnostics"]["spatial"][
        "shared_cells"][0]
    assert table["sst_anom_flags"].str.contains("shared_grid_cell").sum() == shared["rows_sharing"]


def test_checks_read_back_from_fit_json_and_the_report_of_the_run_folder(run, tmp_path: Path) -> None:
    # every check the run recorded is rebuilt from fit.json: its JSON again is what was written
    from envlink.cli import main
    from envlink.metareg.recorded import checks_from_result

    fit = json.loads(run.paths["fit_json"].read_text())
    checks = checks_from_result(fit)
    assert checks is not None and checks.correlogram is not None and checks.spatial_effect is not None
    base = {k: v for k, v in fit.items() if k not in ("scan", "imputation")}
    base["moderator_test"] = {k: v for k, v in fit["moderator_test"].items() if k != "permutation"}
    base["coefficients"] = {**fit["coefficients"], "table": [
        {k: v for k, v in r.items() if k != "permutation_p"} for r in fit["coefficients"]["table"]]}
    base["diagnostics"] = {}
    assert json.loads(json.dumps(checks.add_to(base))) == fit
    text = run.paths["fit_text"].read_text()  # the sentences read back are the run's own
    assert all(line.strip() in text for line in checks.lines() if line.strip())
    # envlink report on the run's folder states what the run's p-values were corrected for
    out = tmp_path / "again.html"
    assert main(["report", str(run.paths["fit_json"].parent), "-o", str(out)]) == 0
    html = out.read_text()
    assert "What was corrected, and how" in html
    assert "The window scan tried 4 windows: family-wise p over 4 windows" in html
    assert "Moran&#x27;s I" in html or "Moran's I" in html
    assert "Imprecise dates" in html and "Small-study checks" in html
    # the figures of the run's own report are drawn again: the scan's null maxima come from
    # fit.json, the residual funnel from the refitted model (the same rows and estimates)
    own = run.paths["report"].read_text()
    for caption in ("The largest statistic over the family in each permutation",
                    "Residuals of the fitted model against their sampling SE"):
        assert caption in own and caption in html, caption
        # the same points give the same PNG bytes (matplotlib draws them deterministically)
        assert _image_before(own, caption) == _image_before(html, caption), caption
    assert len(fit["scan"]["null_maxima"]) == fit["scan"]["n_permutations"]
    assert checks.scan is not None and len(checks.scan.maxima) == fit["scan"]["n_permutations"]


def _image_before(html: str, caption: str) -> str:
    """The embedded PNG of the figure whose alt text starts with ``caption``."""
    start = html.index(f'<img alt="{caption}')
    return html[html.index("base64,", start):html.index('"', html.index("base64,", start))]


def test_schema_errors_name_the_key(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(PROJECT.replace('grid = "sst"\nlags', 'grid = "sstt"\nlags'))
    with pytest.raises(InputError, match=r"'scan\.grid' must be the name of a \[grids\.NAME\].*"
                                         r"Did you mean 'sst'"):
        load_project(bad)
    bad.write_text(PROJECT.replace('spatial = "knn:4"', 'spatial = "knn:0"'))
    with pytest.raises(InputError, match=r"'checks\.spatial' must be one of 'inverse-distance"):
        load_project(bad)
    bad.write_text(PROJECT.replace('draws = 3', 'draws = 1'))
    with pytest.raises(InputError, match=r"'imputation\.draws' must be a whole number >= 2"):
        load_project(bad)


def test_cli_scan_and_run_impute_dates(run, tmp_path: Path, capsys) -> None:
    located = run.paths["csv"]
    out = tmp_path / "scan.json"
    rc = main(["scan", str(located), "--grid", str(data_path("vell_sst_monthly.nc")),
               "--var", "sst", "--effect", "effect", "--variance", "variance",
               "--lags", "0..2", "--spans", "1", "--unit", "M", "--stat", "anomaly",
               "--baseline", "1991-2020", "--spatial", "nearest-valid:40km", "--nested",
               "study_id", "--permutations", "19", "--seed", "1", "--json", str(out),
               "--windows", str(tmp_path / "w.csv"), "--figure", str(tmp_path / "s.png")])
    assert rc == 0
    assert "family-wise p over 3 windows" in capsys.readouterr().out
    assert json.loads(out.read_text())["n_windows"] == 3
    assert len(pd.read_csv(tmp_path / "w.csv")) == 3 and (tmp_path / "s.png").stat().st_size > 0
    assert main(["scan", str(located), "--grid", "x.nc", "--effect", "effect", "--variance",
                 "variance", "--lags", "2..1"]) == 2
    assert "--lags" in capsys.readouterr().err
    # outputs: an existing one is replaced only with --force, an input never (checked first)
    before = out.read_bytes()
    base = ["scan", str(located), "--grid", str(data_path("vell_sst_monthly.nc")), "--effect",
            "effect", "--variance", "variance"]
    assert main([*base, "--json", str(out)]) == 2
    assert "--force" in capsys.readouterr().err and out.read_bytes() == before
    assert main([*base, "--windows", str(located), "--force"]) == 2
    assert "TABLE" in capsys.readouterr().err
    p = tmp_path / "p.toml"
    p.write_text(PROJECT.split("[scan]")[0] + "[export]\nformats = [\"csv\"]\nreport = false\n")
    assert main(["run", str(p), "--out", str(tmp_path / "o"), "--impute-dates", "2",
                 "--no-progress"]) == 0
    fit = json.loads((tmp_path / "o" / "fit.json").read_text())
    assert fit["imputation"]["draws"] == 2


def test_imputed_dates_share_one_read_per_grid_and_equal_one_attach_per_draw(run, tmp_path: Path,
                                                                            monkeypatch) -> None:
    # Reference: the plain path, one envlink.attach and one fit per draw, pooled here by
    # Rubin's rules written out (Rubin 1987, eqs. 3.1.2-3.1.5): the draws that share one
    # cell-series read per grid give the same completed tables, so the same numbers.
    import warnings

    import numpy as np
    from numpy.testing import assert_allclose

    import envlink
    from envlink.errors import EnvlinkWarning
    from envlink.extract.series import CellSeries
    from envlink.locate.plausible import draw_periods
    from envlink.metareg.model import MetaRegression
    from envlink.project.impute import impute_dates

    table = pd.read_csv(run.paths["csv"])
    grid = envlink.open_grid(data_path("vell_sst_monthly.nc"), variable="sst")
    opts = {"stat": "anomaly", "spatial": "nearest-valid:40km", "baseline": "1991-2020"}
    made: list[CellSeries] = []
    make = CellSeries.for_grid.__func__  # type: ignore[attr-defined]
    monkeypatch.setattr(CellSeries, "for_grid",
                        classmethod(lambda cls, *a, **k: made.append(make(cls, *a, **k)) or made[-1]))
    cache = str(tmp_path / "cache")
    got = impute_dates(table, [{"grid": grid, "name": "sst_anom", **opts}], effect="effect",
                       variance="variance", moderators="sst_anom", nested="study_id", draws=3,
                       seed=4, period="sampling_period", cache_dir=cache, progress=False)
    assert len(made) == 1 and made[0].cells_read > 0  # one series for the three draws
    plausible = draw_periods(table, 3, seed=4, period="sampling_period")
    base = table.drop(columns=[c for c in table.columns if c.startswith("sst_anom")])
    with warnings.catch_warnings():  # rows without a value are dropped, as impute_dates does
        warnings.simplefilter("ignore", EnvlinkWarning)
        fits = [MetaRegression(moderators="sst_anom", nested="study_id").fit(
            envlink.attach(plausible.table(base, m), grid, name="sst_anom", progress=False, **opts),
            effect="effect", variance="variance") for m in range(3)]
    est = np.array([f.coef_ for f in fits])
    assert_allclose(got.draws[list(fits[0].terms_)].to_numpy(), est, rtol=1e-12, atol=0)
    within = np.mean([f.se_ ** 2 for f in fits], axis=0)
    between = est.var(axis=0, ddof=1)
    total = within + (1 + 1 / 3) * between
    assert_allclose(got.pooled.table["estimate"].to_numpy(), est.mean(axis=0), rtol=1e-12)
    assert_allclose(got.pooled.table["se"].to_numpy(), np.sqrt(total), rtol=1e-12)
    # a second imputation reads every cell from the store the first one filled
    made.clear()
    impute_dates(table, [{"grid": grid, "name": "sst_anom", **opts}], effect="effect",
                 variance="variance", moderators="sst_anom", nested="study_id", draws=3, seed=4,
                 period="sampling_period", cache_dir=cache, progress=False)
    assert len(made) == 1 and made[0].cells_read == 0


def test_cli_impute_equals_the_python_call(run, tmp_path: Path, capsys) -> None:
    # envlink impute on the run's located table gives the impute_dates result of the same
    # settings (both seeded), written as JSON; bad input exits 2 before any grid is read
    import envlink
    from envlink.project.impute import impute_dates

    located = run.paths["csv"]
    grid_file = str(data_path("vell_sst_monthly.nc"))
    out = tmp_path / "imp.json"
    argv = ["impute", str(located), "--grid", grid_file, "--var", "sst", "--covariate",
            "sst_anom=anomaly", "--baseline", "1991-2020", "--spatial", "nearest-valid:40km",
            "--effect", "effect", "--variance", "variance", "--moderators", "sst_anom",
            "--nested", "study_id", "--period", "sampling_period", "--draws", "3", "--seed", "4",
            "--no-progress", "--no-cache"]
    assert main([*argv, "--json", str(out)]) == 0
    assert "Rubin" in capsys.readouterr().out
    table = pd.read_csv(located)
    grid = envlink.open_grid(grid_file, variable="sst")
    cov = {"grid": grid, "name": "sst_anom", "stat": "anomaly", "baseline": "1991-2020",
           "spatial": "nearest-valid:40km"}
    ref = impute_dates(table, [cov], effect="effect", variance="variance", moderators="sst_anom",
                       nested="study_id", draws=3, seed=4, period="sampling_period", progress=False)
    assert json.loads(out.read_text()) == json.loads(json.dumps(ref.to_dict()))
    assert main([*argv, "--json", str(out)]) == 2  # exists: needs --force
    assert "--force" in capsys.readouterr().err
    assert main([*argv, "--draws", "1"]) == 2  # the last --draws counts
    assert "--draws must be 2 or more" in capsys.readouterr().err
    bad = [a.replace("sst_anom=anomaly", "sst_anom=anomly") for a in argv]
    assert main([*bad[:3], "missing.nc", *bad[4:]]) == 2  # the statistic, before the grid
    err = capsys.readouterr().err
    assert "anomly" in err and "Did you mean 'anomaly'" in err and "missing.nc" not in err
