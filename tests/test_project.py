"""The TOML project file: every bad key or value is named with its line and the allowed values.

The parser is the standard library's ``tomllib`` (TOML 1.0, https://toml.io/en/v1.0.0);
line numbers in messages are checked against the test's own text. The end-to-end run
here uses no grid (locate -> effects -> model -> export); the demo test covers grids.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from envlink.demo_grids import data_path

import envlink
from envlink import InputError
from envlink.cli import main
from envlink.export import file_sha256
from envlink.project import load_project, run_project
from envlink.project.schema import key_lines

STUDIES = """study,lat,lon,when,sick,seen,depth
A,-9.51,-117.20,March 2008,12,80,3
A,-9.62,-117.31,Apr-May 2008,20,90,9
B,9°30'S,117°15'W,2009-02-01/2009-02-20,5,60,4
B,-8.10,-116.90,austral summer 2010/11,30,120,12
C,-10.20,-118.00,June 2011,9,75,6
C,-95.00,-118.00,June 2011,9,75,6
"""

BASE = """\
[project]
title = "test project"

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
moderators = "depth"
method = "REML"
test = "knapp-hartung"

[export]
formats = ["csv", "parquet"]
report = false
"""


def _line_of(text: str, needle: str) -> int:
    """1-based number of the line of ``text`` that holds ``needle``, counted here."""
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def _project(tmp_path: Path, text: str = BASE, name: str = "p.toml") -> Path:
    (tmp_path / "studies.csv").write_text(STUDIES)
    p = tmp_path / name
    p.write_text(text)
    return p


def test_bundled_demo_project_is_valid() -> None:
    project = load_project(data_path("demo.toml"))
    assert [c["name"] for c in project.covariates] == ["sst_anom", "dhw_max", "air_lag3m"]
    assert project.studies == data_path("vell_studies.csv")
    assert len(project.sha256) == 64


def test_key_lines_follow_the_text() -> None:
    text = '# c\n[a]\nx = 1\n\n[[covariates]]\nname = "p"\n[[covariates]]\n name = "q"\n'
    lines = key_lines(text)
    assert lines[("a", "x")] == 3
    assert lines[("covariates", 0, "name")] == 6
    assert lines[("covariates", 1, "name")] == 8


@pytest.mark.parametrize(
    ("old", "new", "pattern"),
    [
        ('method = "REML"', 'methd = "REML"',
         r"p\.toml, line LINE: unknown key 'methd' in \[model\]\. Did you mean 'method'\? "
         r"Allowed keys: moderators, method, test, nested, cluster, permutations, seed, permute\."),
        ('method = "REML"', 'method = "reml2"',
         r"line LINE: the key 'model\.method' must be one of 'REML', 'ML', 'DL', 'PM', 'HE', 'SJ'; "
         r"got 'reml2'\."),
        ('test = "knapp-hartung"', 'test = "t"',
         r"line LINE: the key 'model\.test' must be one of 'z', 'knapp-hartung'; got 't'\."),
        ('kind = "logit_proportion"', 'kind = "logit"',
         r"line LINE: the key 'effects\.kind' must be one of 'logit_proportion', .*'ln_cvr'; "
         r"got 'logit'\."),
        ('formats = ["csv", "parquet"]', 'formats = ["csv", "xls"]',
         r"line LINE: the key 'export\.formats' must be a list drawn from 'csv', 'csv-bom', 'parquet', "
         r"'gpkg', 'xlsx'"),
        ('formats = ["csv", "parquet"]', 'formats = ["csv", "shp"]',
         r"line LINE: the key 'export\.formats' must be .*; got \['csv', 'shp'\]\. 'shp': a shapefile "
         r"cuts column names to 10 characters.*write 'gpkg' instead"),
        ('formats = ["csv", "parquet"]', 'formats = ["csv", "csv-excel"]',
         r"line LINE: the key 'export\.formats' must be .*; got \['csv', 'csv-excel'\]\. both 'csv' and "
         r"'csv-bom': they write the same file; choose one"),
        ("report = false", 'report = "no"', r"line LINE: the key 'export\.report' must be true or false"),
        ('path = "studies.csv"', 'file = "studies.csv"',
         r"line LINE: unknown key 'file' in \[studies\]\. Allowed keys: path, study\."),
        ("[export]", "[exports]", r"line LINE: unknown section 'exports'\. Did you mean 'export'\?"),
        ('lat = "lat"', 'lat = ""', r"line LINE: the key 'locate\.lat' must be a column name"),
        ('lat = "lat"', 'lat = "lat"\norder = "ymd"',
         r"line LINE: the key 'locate\.order' must be one of 'dayfirst', 'monthfirst'; got 'ymd'"),
    ],
)
def test_bad_key_or_value_names_key_line_and_allowed(tmp_path: Path, old: str, new: str,
                                                    pattern: str) -> None:
    assert old in BASE
    text = BASE.replace(old, new, 1)
    p = _project(tmp_path, text)
    pattern = pattern.replace("LINE", str(_line_of(text, new.splitlines()[-1])))
    with pytest.raises(InputError, match=pattern):
        load_project(p)


COVARIATES = """
[grids.sst]
path = "sst.nc"

[[covariates]]
name = "a"
grid = "sst"

[[covariates]]
name = "b"
grid = "sst"
stat = "avg"
"""


def _raises_at(tmp_path: Path, text: str, needle: str, pattern: str) -> None:
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=f"line {_line_of(text, needle)}: " + pattern):
        load_project(p)


def test_covariate_errors_name_the_entry_and_line(tmp_path: Path) -> None:
    text = BASE + COVARIATES
    _raises_at(tmp_path, text, 'stat = "avg"',
               r"the key 'covariates\[1\]\.stat' must be one of 'mean', 'min', 'max', 'sum', 'std', "
               r"'quantile:Q', 'above:T', 'degree-days:T', 'anomaly', 'mmm', 'dhw-max'; got 'avg'\.")
    _raises_at(tmp_path, text.replace('stat = "avg"', 'window = "lag3M"'), 'window = "lag3M"',
               r"the key 'covariates\[1\]\.window' must be one of 'period', 'lag:N\{D\|M\|Y\}'")
    _raises_at(tmp_path, text.replace('stat = "avg"', 'spatial = "nearest-valid"'), "spatial",
               r"the key 'covariates\[1\]\.spatial' must be one of 'nearest', 'bilinear', "
               r"'nearest-valid:Dkm', 'buffer:Rkm', 'polygon'")
    bad_grid = text.replace('grid = "sst"\nstat = "avg"', 'grid = "sts"')
    _raises_at(tmp_path, bad_grid, 'grid = "sts"',
               r"the key 'covariates\[1\]\.grid' must be the name of a \[grids\.NAME\] table "
               r"\('sst'\); got 'sts'\. Did you mean 'sst'\?")
    twice = text.replace('name = "b"\ngrid = "sst"\nstat = "avg"', 'name = "a"\ngrid = "sst"')
    p = _project(tmp_path, twice)
    last = max(i for i, line in enumerate(twice.splitlines(), 1) if line == 'name = "a"')
    with pytest.raises(InputError, match=f"line {last}: covariate name 'a' is used twice"):
        load_project(p)


def test_syntax_error_and_missing_section(tmp_path: Path) -> None:
    text = BASE.replace('method = "REML"', "method = REML")
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"not valid TOML: .*line {_line_of(text, 'method =')}"):
        load_project(p)
    p = _project(tmp_path, "[model]\nmethod = 'ML'\n")
    with pytest.raises(InputError, match=r"needs a \[studies\] section"):
        load_project(p)
    p = _project(tmp_path, '[studies]\nstudy = "s"\n')
    with pytest.raises(InputError, match=r"line 1: \[studies\] needs the key 'path'"):
        load_project(p)
    with pytest.raises(InputError, match=r"no such file"):
        load_project(tmp_path / "missing.toml")


def test_column_missing_from_table_names_key_and_line(tmp_path: Path) -> None:
    text = BASE.replace('lon = "lon"', 'lon = "long"')
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'lon = ')}: the key 'locate\.lon' names column 'long', "
                                         r"which the studies table .* does not have\. "
                                         r"Did you mean 'lon'\?"):
        run_project(p, progress=False)


def test_missing_file_names_key_and_line(tmp_path: Path) -> None:
    text = BASE.replace('path = "studies.csv"', 'path = "studis.csv"')
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'studis')}: the key 'studies\.path' "
                                         r"names '.*studis\.csv', which does not exist"):
        run_project(p, progress=False)
    text = BASE + '[grids.sst]\npath = "nowhere.nc"\n[[covariates]]\nname = "a"\ngrid = "sst"\n'
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'nowhere')}: the key "
                                         r"'grids\.sst\.path' names .*nowhere\.nc"):
        run_project(p, progress=False)


def test_run_without_grids_end_to_end_and_force(tmp_path: Path) -> None:
    p = _project(tmp_path)
    result = run_project(p, progress=False)
    out = tmp_path / "envlink-out"
    assert result.out == out
    t = result.table
    assert len(t) == 6 and list(t.columns[:7]) == ["study", "lat", "lon", "when", "sick", "seen",
                                                    "depth"]
    assert t["locate_status"].tolist()[-1] == "rejected"
    assert t["fit_included"].tolist() == [True] * 5 + [False]
    assert result.fit_rows == 5
    # the fit is the same as fitting the located rows directly (reference: the
    # MetaRegression stage itself on the same rows, depth as a number)
    used = t.iloc[:5].assign(depth=lambda d: d["depth"].astype(float))
    direct = envlink.MetaRegression(moderators="depth", method="REML", test="knapp-hartung").fit(
        used, effect="effect", variance="variance")
    got = json.loads((out / "fit.json").read_text())
    np.testing.assert_allclose([c["estimate"] for c in got["coefficients"]["table"]],
                               [c["estimate"] for c in direct.to_dict()["coefficients"]["table"]],
                               rtol=1e-10)  # fmt: skip
    desc = json.loads((out / "datapackage.json").read_text())
    assert desc["envlink"]["project_sha256"] == file_sha256(p)
    back = pd.read_parquet(out / "enriched.parquet")
    assert back["study"].tolist() == ["A", "A", "B", "B", "C", "C"]
    before = (out / "enriched.csv").read_bytes()
    with pytest.raises(InputError, match=r"Output exists.*enriched\.csv.*force=True"):
        run_project(p, progress=False)
    assert (out / "enriched.csv").read_bytes() == before
    again = run_project(p, progress=False, force=True, out=out)
    assert again.fit_rows == 5


def test_permutation_test_and_report_from_project(tmp_path: Path) -> None:
    text = BASE.replace('test = "knapp-hartung"', 'test = "knapp-hartung"\npermutations = 19\nseed = 7')
    p = _project(tmp_path, text.replace("report = false", "report = true"))
    result = run_project(p, progress=False)
    perm = json.loads(result.paths["datapackage"].read_text())["envlink"]["model"]["permutation"]
    assert perm["n_permutations"] == 19 and perm["seed"] == 7
    assert 1 / 20 <= perm["omnibus"]["p"] <= 1  # (1 + count) / (1 + N), common practice
    assert perm["terms"][0]["label"] == f"permutation p for {perm['terms'][0]['term']} (this model)"
    html = result.paths["report"].read_text()
    assert "(this model) = " in html and "correct for this one model only" in html
    fit = json.loads(result.paths["fit_json"].read_text())
    assert fit["moderator_test"]["permutation"]["omnibus"]["p"] == perm["omnibus"]["p"]
    assert "permutation p (this model)" in html  # beside each coefficient in the model's table
    assert "omnibus permutation p of Q_M" in result.paths["fit_text"].read_text()
    bad = _project(tmp_path, BASE.replace('method = "REML"', 'method = "REML"\npermutations = 9.5'),
                   name="bad.toml")
    with pytest.raises(InputError, match=r"'model\.permutations' must be a whole number >= 0"):
        load_project(bad)


def test_cli_run_exit_codes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _project(tmp_path)
    assert main(["run", str(p), "--out", str(tmp_path / "o"), "--no-progress"]) == 0
    captured = capsys.readouterr()
    assert "enriched.csv" in captured.out and "located: 5 ok, 0 flagged, 1 rejected" in captured.err
    text = BASE.replace('test = "knapp-hartung"', 'test = "kh"')
    bad = _project(tmp_path, text, name="bad.toml")
    assert main(["run", str(bad)]) == 2
    assert f"line {_line_of(text, 'test = ')}: the key 'model.test'" in capsys.readouterr().err
    assert main(["run", str(p), "--out", str(tmp_path / "o")]) == 2  # exists, no --force
    assert "--force" in capsys.readouterr().err


def test_every_schema_key_is_documented() -> None:
    from envlink.project.schema import SECTIONS

    doc = (Path(__file__).parents[1] / "docs" / "project-file.md").read_text()
    headings = {"grids.*": "## `[grids.NAME]`", "covariates[]": "## `[[covariates]]`"}
    for section, keys in SECTIONS.items():
        assert headings.get(section, f"## `[{section}]`") in doc, section
        for key in keys:
            if key != "columns":
                assert f"`{key}`" in doc, (section, key)
    assert "### `[effects.columns]`" in doc
    block = doc.split("## The bundled demo project", 1)[1]
    for line in data_path("demo.toml").read_text().splitlines():
        if line and not line.startswith("#"):
            assert line in block, line  # the documented demo project is the bundled one


def test_stage_errors_name_the_covariate_and_line(tmp_path: Path) -> None:
    import xarray as xr

    from envlink.testing import make_grid

    g = make_grid(lat=[-10.25, -9.75, -9.25, -8.75, -8.25, -7.75],
                  lon=[-118.25, -117.75, -117.25, -116.75, -116.25], start="2007-01-01",
                  periods=72, seed=1)  # fmt: skip
    xr.Dataset({"sst": (g.dims, g.values, {"units": "degC"})},
               coords={"time": g.time.values, "lat": g.lat.values, "lon": g.lon.values}).to_netcdf(
        tmp_path / "sst.nc")
    good = BASE + ('[grids.sst]\npath = "sst.nc"\nvariable = "sst"\n'
                   '[[covariates]]\nname = "t_mean"\ngrid = "sst"\nspatial = "nearest"\n')
    result = run_project(_project(tmp_path, good), progress=False)
    assert result.table["t_mean"].notna().sum() == 5
    bad_var = good.replace('variable = "sst"', 'variable = "sea"')
    with pytest.raises(InputError, match=rf"line {_line_of(bad_var, '[grids.sst]')} \[grids\.sst\]: "):
        run_project(_project(tmp_path, bad_var, name="v.toml"), progress=False, force=True)
    bad_window = good.replace('spatial = "nearest"',
                              'spatial = "nearest"\nstat = "anomaly"\nbaseline = "1900-1910"')
    text_line = _line_of(bad_window, "[[covariates]]")
    with pytest.raises(InputError, match=rf"line {text_line} \(covariate 't_mean'\): "):
        run_project(_project(tmp_path, bad_window, name="w.toml"), progress=False, force=True)


def _fit_depth(result) -> float:
    rows = result.fit.to_dict()["coefficients"]["table"]
    return next(c["estimate"] for c in rows if c["term"] == "depth")


def test_numeric_moderator_written_as_text_is_a_number(tmp_path: Path) -> None:
    # depth with decimal commas (a semicolon CSV) and full-width digits must stay one
    # numeric moderator with one slope, not a category with one level per value.
    p = _project(tmp_path)
    reference = run_project(p, progress=False)
    semi = STUDIES.replace(",", ";").replace(";80;3\n", ";80;3,0\n").replace(";90;9\n", ";90;\uff19\n")
    assert ";3,0\n" in semi and "\uff19" in semi
    (tmp_path / "studies.csv").write_text(semi, encoding="utf-8")
    result = run_project(p, progress=False, out=tmp_path / "o2")
    assert result.fit.to_dict()["model"]["coefficient_count"] == 2 and result.fit_rows == 5
    np.testing.assert_allclose(_fit_depth(result), _fit_depth(reference), rtol=1e-10)


def test_moderator_cell_that_is_not_a_number_names_row_and_column(tmp_path: Path) -> None:
    p = _project(tmp_path)
    (tmp_path / "studies.csv").write_text(STUDIES.replace(",75,6\n", ",75,approx. 6\n", 1))
    with pytest.raises(InputError, match=(
            rf"p\.toml, line {_line_of(BASE, '[model]')}: the column 'depth' holds numbers, but "
            r"row 5 'approx\. 6' is not a number\. .*C\(depth\)")):
        run_project(p, progress=False)
    # a blank (or 'n/a') cell is missing: that row is left out of the fit, not an error
    (tmp_path / "studies.csv").write_text(STUDIES.replace(",75,6\n", ",75,n/a\n", 1))
    assert run_project(p, progress=False).fit_rows == 4


def test_output_folder_that_is_a_file_or_cannot_be_made(tmp_path: Path, monkeypatch, capsys) -> None:
    p = _project(tmp_path)
    (tmp_path / "afile").write_text("")
    assert main(["run", str(p), "--out", str(tmp_path / "afile"), "--no-progress"]) == 2
    assert "The output folder" in capsys.readouterr().err
    (tmp_path / "ro").mkdir()

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "mkdir", refuse)
    assert main(["run", str(p), "--out", str(tmp_path / "ro" / "sub"), "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert "Cannot create the output folder" in err and "Permission denied" in err and "bug" not in err


def test_too_few_rows_says_which_column_is_lacking(tmp_path: Path) -> None:
    p = _project(tmp_path)
    (tmp_path / "studies.csv").write_text(STUDIES.replace(",3\n", ",\n").replace(",9\n", ",\n")
                                          .replace(",4\n", ",\n").replace(",12\n", ",\n"))
    with pytest.raises(InputError, match=r"only 1 of 6 rows .* Rows lacking each: rejected by locate 1, "
                                         r"'depth' 4\."):
        run_project(p, progress=False)
    (tmp_path / "studies.csv").write_text(STUDIES.splitlines()[0] + "\n")
    with pytest.raises(InputError, match=r"has no data rows \(only a header\)"):
        run_project(p, progress=False)


def test_formula_error_names_the_moderators_line(tmp_path: Path) -> None:
    text = BASE.replace('moderators = "depth"', 'moderators = "dpeth"')
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"p\.toml, line {_line_of(text, 'moderators = ')}: .*'dpeth'"):
        run_project(p, progress=False)


def test_locate_section_missing_or_incomplete_is_named(tmp_path: Path) -> None:
    p = _project(tmp_path, '[studies]\npath = "studies.csv"\n[export]\nformats = ["csv"]\nreport = false\n')
    with pytest.raises(InputError, match=r"p\.toml: the \[locate\] section must name the studies table's columns"):
        run_project(p, progress=False)
    text = BASE.replace('lon = "lon"\n', "")
    q = _project(tmp_path, text, name="q.toml")
    with pytest.raises(InputError, match=rf"q\.toml, line {_line_of(text, '[locate]')} \[locate\]: .*'lon' was not given"):
        run_project(q, progress=False)


def test_output_that_is_an_input_is_refused_even_with_force(tmp_path: Path) -> None:
    # studies.csv in the output folder under the export name would be overwritten
    text = BASE.replace('[export]\n', '[export]\nname = "studies"\n')
    p = _project(tmp_path, text)
    before = (tmp_path / "studies.csv").read_bytes()
    with pytest.raises(InputError, match=r"The output .*studies\.csv' is also an input of this run "
                                         rf"\(studies\.path, .*p\.toml, line {_line_of(text, 'path = ')}\); "
                                         r".*refused even with force=True"):
        run_project(p, out=tmp_path, force=True, progress=False)
    assert (tmp_path / "studies.csv").read_bytes() == before


def test_too_few_rows_in_a_tiny_table(tmp_path: Path) -> None:
    p = _project(tmp_path)
    (tmp_path / "studies.csv").write_text("\n".join(STUDIES.splitlines()[:3]) + "\n")
    with pytest.raises(InputError, match=r"only 2 of 2 rows .* The table has only 2\.$"):
        run_project(p, progress=False)


def test_too_few_rows_is_one_error_class_exit_2_in_a_project(tmp_path: Path, capsys) -> None:
    # Checks against the exit codes of README.md / docs: too few usable rows is a property
    # of the data (bad input, exit 2), the same class as envlink fit's (TooFewRowsError).
    from envlink.errors import ModelError, TooFewRowsError

    p = _project(tmp_path)
    (tmp_path / "studies.csv").write_text("\n".join(STUDIES.splitlines()[:2]) + "\n")
    with pytest.raises(TooFewRowsError, match=r"only 1 of 1 rows") as info:
        run_project(p, progress=False)
    assert isinstance(info.value, ModelError)
    assert main(["run", str(p), "--out", str(tmp_path / "o"), "--no-progress"]) == 2
    assert "error: " in capsys.readouterr().err


def test_project_path_that_is_a_folder_or_a_table(tmp_path: Path) -> None:
    p = _project(tmp_path)
    with pytest.raises(InputError, match=r"it is a folder; give the project's \.toml file \(the folder holds p\.toml\)"):
        load_project(tmp_path)
    with pytest.raises(InputError, match=r"not valid TOML: .* takes a TOML project file"):
        load_project(p.parent / "studies.csv")


def test_read_only_output_folder_is_found_before_the_work(tmp_path: Path, monkeypatch, capsys) -> None:
    import tempfile

    p = _project(tmp_path)
    (tmp_path / "ro").mkdir()
    real = tempfile.mkstemp

    def refuse(*args, **kwargs):
        if str(kwargs.get("dir", "")).endswith("ro"):
            raise PermissionError(13, "Permission denied")
        return real(*args, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    assert main(["run", str(p), "--out", str(tmp_path / "ro"), "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert "Cannot write in the output folder" in err and "Permission denied" in err
    assert "located:" not in err  # no work was done


def test_category_labels_differing_only_in_white_space_are_one_level(tmp_path: Path) -> None:
    # "belt" and "belt\u00a0" look the same in a spreadsheet; they are one category
    text = BASE.replace('moderators = "depth"', 'moderators = "C(method)"')
    p = _project(tmp_path, text)
    rows = STUDIES.splitlines()
    methods = ["belt", "belt\u00a0", " belt ", "quadrat", "quadrat\u200b", "quadrat"]
    body = [f"{r},{m}" for r, m in zip(rows[1:], methods, strict=True)]
    (tmp_path / "studies.csv").write_text("\n".join([rows[0] + ",method", *body]) + "\n")
    result = run_project(p, progress=False)
    terms = [c["term"] for c in result.fit.to_dict()["coefficients"]["table"]]
    assert len(terms) == 2 and terms[0] == "intercept"  # one contrast: belt vs quadrat
    assert result.table["method"].tolist() == methods  # the output keeps the cells as written


def test_unwritable_cache_folder_names_its_key(tmp_path: Path, monkeypatch) -> None:
    text = BASE.replace('title = "test project"', 'title = "test project"\ncache_dir = "cache"')
    p = _project(tmp_path, text)
    real = Path.mkdir

    def refuse(self, *args, **kwargs):
        if self.name == "cache":
            raise PermissionError(13, "Permission denied")
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Path, "mkdir", refuse)
    with pytest.raises(InputError, match=rf"p\.toml, line {_line_of(text, 'cache_dir')}: Cannot create the cache "
                                         r"folder .*Permission denied"):
        run_project(p, progress=False)


def test_grid_file_that_is_not_a_grid_names_its_table(tmp_path: Path, capsys) -> None:
    (tmp_path / "sst.nc").write_text("not a grid\n")
    text = BASE + ('[grids.sst]\npath = "sst.nc"\n'
                   '[[covariates]]\nname = "t_mean"\ngrid = "sst"\n')
    p = _project(tmp_path, text)
    # a file that is not what it claims is bad input (2), as in envlink attach and envlink grid
    assert main(["run", str(p), "--no-progress"]) == 2
    err = capsys.readouterr().err
    assert f"p.toml, line {_line_of(text, '[grids.sst]')} [grids.sst]: Cannot open the grid file" in err
    assert "bug" not in err


def test_missing_mmm_climatology_file_is_found_at_the_start(tmp_path: Path) -> None:
    text = BASE + ('[grids.sst]\npath = "studies.csv"\n'
                   '[[covariates]]\nname = "dhw"\ngrid = "sst"\nstat = "dhw-max"\nmmm = "clim.nc"\n')
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'mmm = ')}: the key 'covariates\[0\]\.mmm' "
                                         r"names .*clim\.nc', which does not exist"):
        run_project(p, progress=False)


def test_effects_roles_and_options_are_named_as_project_keys(tmp_path: Path) -> None:
    # common practice: a project-file message names the key and its line, not the Python call
    # (effect_sizes' keyword names stay in the Python API's own messages)
    text = BASE.replace('events = "sick"', 'evnts = "sick"')
    p = _project(tmp_path, text)
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'evnts')}: \[effects\.columns\] has the role "
                                         r"'evnts', which kind 'logit_proportion' does not read\. Did you mean "
                                         r"'events'\?") as info:
        run_project(p, progress=False)
    assert "effect_sizes" not in str(info.value) and "keyword" not in str(info.value)
    text = BASE.replace('events = "sick"\n', "")
    with pytest.raises(InputError, match=rf"line {_line_of(text, '[effects.columns]')}: \[effects\.columns\] "
                                         r"lacks the role\(s\) events that kind 'logit_proportion' needs"):
        run_project(_project(tmp_path, text), progress=False)
    text = BASE.replace('kind = "logit_proportion"', 'kind = "logit_proportion"\nexact = true')
    with pytest.raises(InputError, match=rf"line {_line_of(text, 'exact')}: the key 'effects\.exact' does not "
                                         r"apply to kind 'logit_proportion'; it takes 'correction', 'zero_cells'"):
        run_project(_project(tmp_path, text), progress=False)
    # the Python API keeps its own wording
    with pytest.raises(InputError, match=r"effect_sizes\(kind='logit_proportion'\) takes the column keywords"):
        envlink.effect_sizes(pd.DataFrame({"k": [1], "n": [2]}), "logit_proportion", evnts="k", total="n")
