"""Effect kinds, zero-cell rules and export formats: every interface accepts and refuses the same names.

The interfaces are the Python API (``envlink.effect_sizes``, ``envlink.group_effects``,
the count kinds' ``zero_cells=``, ``envlink.export_table``) and the project file
(``envlink.load_project``). There is no command-line option for these vocabularies:
``envlink run`` reads them from the project file. Spellings follow the registries'
policy (case-insensitive, ``-`` = ``_``, surrounding blanks ignored); outputs record
the canonical name. A new kind or format registered at run time goes through the
same interfaces: tests/test_recipes.py carries out the recipes of docs/architecture.md.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

import envlink
from envlink import InputError
from envlink.effects import EFFECT_KINDS, ZERO_CELL_RULES, EffectKind, ZeroCellRule
from envlink.effects.groups import GroupKind
from envlink.export import EXPORT_FORMATS
from envlink.project import load_project, run_project

KINDS_OK = ["Logit_Proportion", "logit-proportion", "freeman_tukey", "Freeman-Tukey", " FISHER_Z ",
            "Hedges-G", "ln-cvr", "LOG_ODDS_RATIO"]  # fmt: skip
KINDS_BAD = ["logit", "bogus", "", "logit_proportion:2", "hedges g", "odds_ratio"]
ZERO_OK = ["zero_rows", "Zero-Rows", "ALL_ROWS", "all-rows", " none "]
ZERO_BAD = ["some", "bogus", "zero", "all rows", ""]
FORMATS_OK = ["csv", "CSV", "GPKG", "Parquet", " gpkg ", "XLSX"]
FORMATS_BAD = ["xls", "bogus", "gpkgg", "json", ""]

#: one value per role, enough for every kind to give a finite effect
VALUES = {"events": 3, "total": 20, "events1": 3, "total1": 20, "events2": 6, "total2": 22,
          "mean1": 5.0, "sd1": 1.0, "n1": 12, "mean2": 4.0, "sd2": 1.5, "n2": 14, "r": 0.3, "n": 40}  # fmt: skip

PROJECT = """\
[studies]
path = "studies.csv"

[locate]
lat = "lat"
lon = "lon"
period = "when"

[effects]
kind = {kind}
{extra}
[effects.columns]
events = "x"
total = "n"

[export]
formats = {formats}
report = false
"""


def _project(tmp_path: Path, *, kind: str = "logit_proportion", formats: str = '["csv"]', extra: str = "") -> Path:
    (tmp_path / "studies.csv").write_text("lat,lon,when,x,n\n-9.5,-117.2,March 2008,3,20\n"
                                          "-9.6,-117.3,April 2008,0,15\n", encoding="utf-8")  # fmt: skip
    p = tmp_path / "p.toml"
    p.write_text(PROJECT.format(kind=json.dumps(kind), formats=formats, extra=extra), encoding="utf-8")
    return p


def _line(path: Path, key: str) -> int:
    """The 1-based line of the file that sets ``key``."""
    lines = path.read_text(encoding="utf-8").splitlines()
    return next(i for i, line in enumerate(lines, start=1) if line.startswith(f"{key} ="))


def _project_accepts(tmp_path: Path, **kwargs: str) -> bool:
    try:
        load_project(_project(tmp_path, **kwargs))
    except InputError:
        return False
    return True


def _table_for(kind: str) -> tuple[pd.DataFrame, dict[str, str]]:
    roles = EFFECT_KINDS[kind].info["roles"] if EFFECT_KINDS.accepts(kind) else ("events", "total")
    return pd.DataFrame({f"c_{r}": [VALUES[r]] for r in roles}), {r: f"c_{r}" for r in roles}


def _api_accepts_kind(kind: str) -> bool:
    table, columns = _table_for(kind)
    try:
        out = envlink.effect_sizes(table, kind, **columns)  # type: ignore[arg-type]
    except InputError as exc:
        assert "'kind' parameter of effect_sizes" in str(exc)
        return False
    assert np.isfinite(out["effect"]).all()
    return True


# ----------------------------------------------------------------- effect kinds
@pytest.mark.parametrize("kind", KINDS_OK + KINDS_BAD)
def test_effect_kind_accepted_alike_by_api_and_project(tmp_path: Path, kind: str) -> None:
    expected = kind in KINDS_OK
    assert EFFECT_KINDS.accepts(kind) is expected
    assert _api_accepts_kind(kind) is expected
    assert _project_accepts(tmp_path, kind=kind) is expected


def test_refused_kind_names_the_allowed_kinds_everywhere(tmp_path: Path) -> None:
    table, columns = _table_for("logit_proportion")
    with pytest.raises(InputError, match=r"'kind' parameter of effect_sizes must be one of 'logit_proportion'.*"
                                         r"'freeman_tukey'.*'ln_cvr'; got 'logit'"):
        envlink.effect_sizes(table, "logit", **columns)  # type: ignore[arg-type]
    p = _project(tmp_path, kind="logit")
    with pytest.raises(InputError, match=rf"line {_line(p, 'kind')}: the key 'effects\.kind' must be one of "
                                         r"'logit_proportion'.*'freeman_tukey'.*; got 'logit'"):
        load_project(p)


@pytest.mark.parametrize("kind", ["Fisher_Z", "logit-proportion", "ARCSINE_PROPORTION", "freeman-tukey"])
def test_groupwise_kinds_accept_any_spelling(kind: str) -> None:
    rec = pd.DataFrame({"g": list("aaaaa"), "x": [1.0, 2, 3, 4, 6], "y": [2.0, 1, 4, 3, 5], "o": [1, 0, 0, 1, 0]})
    cols = {"x": "x", "y": "y"} if "fisher" in kind.lower() else {"outcome": "o"}
    out = envlink.group_effects(rec, "g", kind, **cols)  # type: ignore[arg-type]
    canonical = EFFECT_KINDS[kind].name
    assert EFFECT_KINDS[kind].info["groupwise"]
    values = (out["r"].iloc[0], 5) if canonical == "fisher_z" else (2, 5)
    assert_allclose(out["effect"], getattr(envlink.effects, canonical)(*values).effect, rtol=1e-12)


def test_group_effects_refuses_kinds_it_cannot_compute_from_records() -> None:
    rec = pd.DataFrame({"g": ["a"], "o": [1]})
    for kind in ("log_odds_ratio", "logit"):
        with pytest.raises(InputError, match=r"'kind' parameter of group_effects must be one of "
                                             r"'logit_proportion', 'arcsine_proportion', 'freeman_tukey', "
                                             r"'hedges_g', 'log_response_ratio', 'fisher_z', 'ln_vr', 'ln_cvr'"):
            envlink.group_effects(rec, "g", kind, outcome="o")  # type: ignore[arg-type]


def test_the_registry_is_the_one_list_of_kinds() -> None:
    # no Literal alias repeats the names, and envlink.effects offers each kind's array
    # function under its canonical name by looking it up in the registry
    assert EffectKind is str and ZeroCellRule is str and GroupKind is str
    for entry in EFFECT_KINDS:
        func = getattr(envlink.effects, entry.name)
        assert func is entry.obj.resolve() and entry.name in envlink.effects.__all__  # type: ignore[union-attr]
        assert entry.name in dir(envlink.effects)


def test_every_kind_states_its_roles_and_options() -> None:
    for entry in EFFECT_KINDS:
        assert entry.info["roles"] and set(entry.info["options"]) <= set(envlink.effects.kinds.OPTIONS)
        assert callable(entry.obj) and entry.summary


# ----------------------------------------------------------------- zero-cell rules
def _api_accepts_zero_rule(rule: str) -> bool:
    results = []
    for call in (
        lambda: envlink.effects.logit_proportion([0, 3], [10, 20], zero_cells=rule),  # type: ignore[arg-type]
        lambda: envlink.effects.log_odds_ratio([0], [10], [3], [20], zero_cells=rule),  # type: ignore[arg-type]
        lambda: envlink.effect_sizes(pd.DataFrame({"x": [0], "n": [10]}), "logit_proportion", events="x",
                                     total="n", zero_cells=rule),  # type: ignore[arg-type]
        lambda: envlink.group_effects(pd.DataFrame({"g": ["a", "a"], "o": [0, 0]}), "g", "logit_proportion",
                                      outcome="o", zero_cells=rule),  # type: ignore[arg-type]
    ):  # fmt: skip
        try:
            call()
            results.append(True)
        except InputError as exc:
            assert "'zero_cells' parameter" in str(exc) and "'zero_rows', 'all_rows', 'none'" in str(exc)
            results.append(False)
    assert len(set(results)) == 1, results
    return results[0]


@pytest.mark.parametrize("rule", ZERO_OK + ZERO_BAD)
def test_zero_cell_rule_accepted_alike_by_api_and_project(tmp_path: Path, rule: str) -> None:
    expected = rule in ZERO_OK
    assert ZERO_CELL_RULES.accepts(rule) is expected
    assert _api_accepts_zero_rule(rule) is expected
    assert _project_accepts(tmp_path, extra=f"zero_cells = {json.dumps(rule)}\n") is expected


def test_zero_cell_spellings_give_the_canonical_rule() -> None:
    # hand-computed (Borenstein et al. 2009, ch. 5 continuity correction): 0 of 10 with 0.5
    # added to both cells gives ln(0.5 / 10.5); with "none" the row has no value
    r = envlink.effects.logit_proportion([0, 3], [10, 20], zero_cells="All-Rows")  # type: ignore[arg-type]
    assert_allclose(r.effect, [math.log(0.5 / 10.5), math.log(3.5 / 17.5)], rtol=1e-15)
    r = envlink.effects.logit_proportion([0], [10], zero_cells=" NONE ")  # type: ignore[arg-type]
    assert np.isnan(r.effect[0]) and r.flags.tolist() == ["zero_cell"]


# ----------------------------------------------------------------- export formats
def _api_accepts_format(tmp_path: Path, fmt: str) -> bool:
    table = pd.DataFrame({"reef": ["Pell"], "site_lat": [-9.1], "site_lon": [-117.2]})
    try:
        paths = envlink.export_table(table, tmp_path / "out", formats=[fmt])
    except InputError as exc:
        assert "'formats' parameter of export_table must be a list of csv, csv-bom, parquet, gpkg, xlsx" in str(exc)
        return False
    assert EXPORT_FORMATS[fmt].name in paths and paths[EXPORT_FORMATS[fmt].name].is_file()
    return True


@pytest.mark.parametrize("fmt", FORMATS_OK + FORMATS_BAD)
def test_export_format_accepted_alike_by_api_and_project(tmp_path: Path, fmt: str) -> None:
    expected = fmt in FORMATS_OK
    assert EXPORT_FORMATS.accepts(fmt) is expected
    assert _api_accepts_format(tmp_path, fmt) is expected
    assert _project_accepts(tmp_path, formats=json.dumps([fmt])) is expected


def test_refused_format_names_the_formats_everywhere(tmp_path: Path) -> None:
    with pytest.raises(InputError, match=r"must be a list of csv, csv-bom, parquet, gpkg, xlsx; got 'xls'"):
        envlink.export_table(pd.DataFrame({"a": [1]}), tmp_path, formats=["csv", "xls"])
    p = _project(tmp_path, formats='["csv", "xls"]')
    with pytest.raises(InputError, match=rf"line {_line(p, 'formats')}: the key 'export\.formats' must be a list "
                                         r"drawn from 'csv', 'csv-bom', 'parquet', 'gpkg', 'xlsx'; got \['csv', 'xls'\]"):
        load_project(p)


def test_project_run_records_canonical_names(tmp_path: Path) -> None:
    p = _project(tmp_path, kind="Freeman-Tukey", formats='["CSV", " Parquet "]')
    result = run_project(p, out=tmp_path / "out", progress=False)
    assert sorted(result.paths) == ["csv", "datapackage", "parquet"]
    package = json.loads(result.paths["datapackage"].read_text(encoding="utf-8"))
    assert package["envlink"]["effects"]["kind"] == "freeman_tukey"
    # Freeman & Tukey (1950) double arcsine, halved as in docs/methods.md: 3 of 20
    want = 0.5 * (math.asin(math.sqrt(3 / 21)) + math.asin(math.sqrt(4 / 21)))
    assert_allclose(result.table["effect"].iloc[0], want, rtol=1e-12)
    assert_allclose(result.table["variance"].iloc[0], 1 / (4 * 20 + 2), rtol=1e-12)
