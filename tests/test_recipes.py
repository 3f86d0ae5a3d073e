"""The recipes of docs/architecture.md, carried out: a toy rule per recipe, through every interface.

Each test follows one "Recipe: ..." section of docs/architecture.md step by step. It
registers a small extra rule with the same constructor and registry call that the
recipe's module uses, then uses it by name through the Python API, the command line
(``envlink.cli.main``: the vocabulary's own option where one exists, else ``envlink
run`` on a project file) and a project file (``envlink.run_project``), checks that
``--help`` and the docs table list it, and unregisters it, after which every
interface refuses it. Names are written in other spellings on purpose: the registry's
spelling policy applies to a new rule as to the built-in ones.

The spellings of the built-in rules are tested in tests/extract/test_vocabulary.py,
tests/metareg/test_vocabulary.py and tests/test_vocabulary_effects.py.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_allclose
from reference.bcg import table as bcg_table
from statsmodels.regression.linear_model import WLS

import envlink
from envlink.cli import main
from envlink.core.lazy import LazyFunction
from envlink.core.registry import Entry, Registry
from envlink.effects import EFFECT_KINDS, EffectResult
from envlink.errors import InputError
from envlink.export import EXPORT_FORMATS
from envlink.extract import stats as kernels
from envlink.extract.rules import SPATIAL_RULES
from envlink.extract.rules.nearest import Nearest
from envlink.extract.statistics import STATISTICS, Statistic
from envlink.geo import great_circle_km
from envlink.metareg.estimators import TauFit
from envlink.metareg.vocabulary import ESTIMATORS
from envlink.project import load_project, run_project

PAGE = Path(__file__).resolve().parents[1] / "docs" / "architecture.md"
RECIPES = ("a spatial rule", "a statistic", "a tau² estimator", "an effect kind", "an export format")


@contextmanager
def registered(registry: Registry[Any], entry: Entry[Any]) -> Iterator[Entry[Any]]:
    """``entry`` in ``registry`` for the block; unregistered after it, whatever happens."""
    registry.add(entry)
    try:
        yield entry
    finally:
        registry.remove(entry.name)
    assert not registry.accepts(entry.name)


def _help(command: str, capsys: pytest.CaptureFixture[str]) -> str:
    capsys.readouterr()
    assert main([command, "--help"]) == 0
    return " ".join(capsys.readouterr().out.split())


def _toml(tables: dict[str, dict[str, Any]], covariates: list[dict[str, Any]] | None = None) -> str:
    """A project file from {section: {key: value}} (values as JSON, which TOML reads alike)."""
    out = []
    for section, keys in tables.items():
        out.append(f"[{section}]")
        out += [f"{k} = {json.dumps(v)}" for k, v in keys.items()]
    for cov in covariates or []:
        out.append("[[covariates]]")
        out += [f"{k} = {json.dumps(v)}" for k, v in cov.items()]
    return "\n".join(out) + "\n"


def test_the_page_has_each_recipe_and_names_files_that_exist() -> None:
    text = PAGE.read_text(encoding="utf-8")
    headings = re.findall(r"^### Recipe: (.+)$", text, flags=re.M)
    assert tuple(headings) == RECIPES
    root = PAGE.parents[1]
    present = text.partition("## What moved where")[0]  # the history names files that are gone
    # (placeholders such as rules/NAME.py are in capitals, so they do not match)
    named = set(re.findall(r"\b((?:envlink|tests|docs)/[a-z0-9_/]+\.(?:py|md))\b", present))
    assert named and not [p for p in sorted(named) if not (root / p).is_file()]


# ------------------------------------------------------------------ extraction
@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A daily grid (3 x 3 cells of 1°, two years), a located table and a studies table."""
    d = tmp_path_factory.mktemp("recipes")
    days = pd.date_range("2000-01-01", "2001-12-31", freq="D")
    doy = days.day_of_year.to_numpy()[:, None, None]
    values = 28.0 + 2.0 * np.sin(2 * np.pi * doy / 365.25) + 0.1 * np.arange(9.0).reshape(1, 3, 3)
    xr.Dataset(
        {"sst": (("time", "lat", "lon"), values, {"units": "degC"})},
        coords={"time": days, "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5, 12.5]},
    ).to_netcdf(d / "daily.nc")
    pd.DataFrame({
        "site_lat": [1.2, 2.1], "site_lon": [11.7, 10.9], "period_start": ["2001-03-01", "2001-06-10"],
        "period_end": ["2001-05-31", "2001-08-20"], "locate_status": ["ok", "ok"],
    }).to_csv(d / "located.csv", index=False)  # fmt: skip
    pd.DataFrame({"lat": [1.2, 2.1], "lon": [11.7, 10.9], "when": ["2001-03-01/2001-05-31", "2001-06-10/2001-08-20"],
                  "sick": [3, 5], "seen": [20, 30]}).to_csv(d / "studies.csv", index=False)
    return d


def _window_values(files: Path, row: int, lat_i: int, lon_i: int) -> np.ndarray:
    """The grid's daily values of one cell over one row's window, read with xarray alone."""
    located = pd.read_csv(files / "located.csv")
    with xr.open_dataset(files / "daily.nc") as ds:
        cell = ds["sst"].isel(lat=lat_i, lon=lon_i)
        span = cell.sel(time=slice(located["period_start"][row], located["period_end"][row]))
        return np.asarray(span.values, dtype=np.float64)


def _attach_cli(files: Path, out: Path, option: str, name: str) -> int:
    return main(["attach", str(files / "located.csv"), "--grid", str(files / "daily.nc"), "--name", "v",
                 option, name, "-o", str(out), "--force", "--no-cache"])


def _covariate_project(files: Path, folder: Path, **covariate: str) -> Path:
    path = folder / "project.toml"
    path.write_text(_toml({
        "studies": {"path": str(files / "studies.csv")},
        "locate": {"lat": "lat", "lon": "lon", "period": "when"},
        "grids.sst": {"path": str(files / "daily.nc")},
        "export": {"formats": ["csv"], "report": False},
    }, [{"name": "v", "grid": "sst", **covariate}]), encoding="utf-8")
    return path


def _refused_everywhere(files: Path, tmp_path: Path, param: str, option: str, name: str) -> None:
    table = pd.read_csv(files / "located.csv")
    with pytest.raises(InputError, match=f"'{param}' parameter of attach"):
        envlink.attach(table, envlink.open_grid(files / "daily.nc"), name="v", **{param: name})
    assert _attach_cli(files, tmp_path / "refused.csv", option, name) == 2
    with pytest.raises(InputError, match=f"the key 'covariates\\[0\\]\\.{param}' must be one of"):
        load_project(_covariate_project(files, tmp_path, **{param: name}))


def test_recipe_a_statistic(files: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # docs/architecture.md, "Recipe: a statistic": one Statistic(...) in STATISTICS, its kernel
    # built from the window kernels of envlink/extract/stats.py, its units those of the grid
    toy = Statistic("toy-range", "the window's greatest value minus its least",
                    lambda w, arg: kernels.window_max(w) - kernels.window_min(w), units="{u}")
    grid = envlink.open_grid(files / "daily.nc")
    table = pd.read_csv(files / "located.csv")
    with registered(STATISTICS, toy.entry()):
        # the Python API
        api = envlink.attach(table, grid, name="v", stat="Toy_Range")
        assert api.attrs["envlink"]["v"]["stat"] == "toy-range" and api.attrs["envlink"]["v"]["units"] == "degC"
        # row 0: site (1.2, 11.7) lies in cell (1, 1); max − min of its daily values over
        # 2001-03-01..2001-05-31, computed with xarray and NumPy alone (the definition)
        window = _window_values(files, 0, 1, 1)
        assert window.size == 92
        assert_allclose(api["v"].iloc[0], window.max() - window.min(), rtol=1e-12)
        # the command line: the option, and its --help
        assert _attach_cli(files, tmp_path / "cli.csv", "--stat", "TOY-RANGE") == 0
        assert_allclose(pd.read_csv(tmp_path / "cli.csv")["v"], api["v"], rtol=1e-12)
        assert "toy-range" in _help("attach", capsys)
        # a project file: the run, and the schema's message for a near miss names the new rule
        result = run_project(_covariate_project(files, tmp_path, stat=" toy_range "), out=tmp_path / "out",
                             progress=False)  # fmt: skip
        assert_allclose(result.table["v"], api["v"], rtol=1e-12)
        with pytest.raises(InputError, match=r"must be one of .*'toy-range'.*; got 'toy-rang'"):
            load_project(_covariate_project(files, tmp_path, stat="toy-rang"))
        # the docs table (python tests/test_doc_tables.py --update writes it into docs/extract.md)
        assert "| `toy-range` |  | the window's greatest value minus its least |" in STATISTICS.doc_table()
    _refused_everywhere(files, tmp_path, "stat", "--stat", "toy-range")


class _WestOfNearest(Nearest):
    """A toy rule: the cell west of the one holding the site (its own in the first column)."""

    def sources(self, plan):  # noqa: ANN001, ANN201
        srcs = super().sources(plan)
        nx = plan.geom.shape[1]

        def west(cells: np.ndarray) -> np.ndarray:
            return np.where((cells >= 0) & (cells % nx > 0), cells - 1, cells)

        srcs.cells, srcs.row_cell = west(srcs.cells), west(srcs.row_cell)
        lat, lon = plan.geom.cell_latlon(srcs.row_cell)  # the reported cell and its distance
        srcs.row_dist = great_circle_km(plan.lat, plan.lon, lat, lon)
        return srcs


def _haversine_km(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Great-circle distance by the haversine formula on the IUGG mean sphere (from memory)."""
    p1, p2, dl = np.radians(lat1), np.radians(lat2), np.radians(lon2 - lon1)
    h = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2) ** 2
    return float(2 * 6371.0088 * np.arcsin(np.sqrt(h)))


def test_recipe_a_spatial_rule(files: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # docs/architecture.md, "Recipe: a spatial rule": a SpatialRule subclass whose sources()
    # starts from the nearest rule's, its RULE object, and RULE.entry() in SPATIAL_RULES
    rule = _WestOfNearest("toy-west", "the cell west of the one holding the site")
    grid = envlink.open_grid(files / "daily.nc")
    table = pd.read_csv(files / "located.csv")
    with registered(SPATIAL_RULES, rule.entry()):
        api = envlink.attach(table, grid, name="v", spatial="Toy_West")
        assert api.attrs["envlink"]["v"]["spatial"] == "toy-west"
        # row 0 sits in cell (1, 1) and reads (1, 0); row 1 sits in the first column, cell
        # (2, 0), and keeps it. Daily steps weigh alike, so the value is the plain mean
        # of the cell's daily values over the window (xarray and NumPy alone)
        assert_allclose(api["v"], [_window_values(files, 0, 1, 0).mean(), _window_values(files, 1, 2, 0).mean()],
                        rtol=1e-12)
        assert_allclose(api[["v_cell_lat", "v_cell_lon"]], [[1.5, 10.5], [2.5, 10.5]], rtol=0, atol=1e-12)
        assert_allclose(api["v_distance_km"], [_haversine_km(1.2, 11.7, 1.5, 10.5), _haversine_km(2.1, 10.9, 2.5, 10.5)],
                        rtol=1e-9)
        assert _attach_cli(files, tmp_path / "cli.csv", "--spatial", "TOY-WEST") == 0
        assert_allclose(pd.read_csv(tmp_path / "cli.csv")["v"], api["v"], rtol=1e-12)
        assert "toy-west" in _help("attach", capsys)
        result = run_project(_covariate_project(files, tmp_path, spatial="toy_west"), out=tmp_path / "out",
                             progress=False)  # fmt: skip
        assert_allclose(result.table["v"], api["v"], rtol=1e-12)
        assert "| `toy-west` |" in SPATIAL_RULES.doc_table()
    _refused_everywhere(files, tmp_path, "spatial", "--spatial", "toy-west")


# ------------------------------------------------------------------ meta-regression
def tau2_zero(d: Any, *, g0: Any, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """A toy tau² estimator: no heterogeneity at all (the fixed-effect model)."""
    return TauFit(0.0, True, 0)


def test_recipe_a_tau2_estimator(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # docs/architecture.md, "Recipe: a tau² estimator": the function with the estimators'
    # signature, and one Entry in ESTIMATORS naming it as "module:function"
    entry = Entry("ZERO", "tau² fixed at 0 (a toy estimator)", obj=f"{__name__}:tau2_zero",
                  aliases=("no-heterogeneity",),
                  info={"words": "no heterogeneity", "multilevel": False, "likelihood": None})
    bcg = bcg_table()
    bcg["nt"], bcg["nc"] = bcg["vacc_tb"] + bcg["vacc_ok"], bcg["ctrl_tb"] + bcg["ctrl_ok"]
    bcg.assign(lat=-9.5, lon=-117.2, when="March 2008").to_csv(tmp_path / "bcg.csv", index=False)
    project = tmp_path / "project.toml"
    project.write_text(_toml({
        "studies": {"path": "bcg.csv"}, "locate": {"lat": "lat", "lon": "lon", "period": "when"},
        "effects": {"kind": "log_risk_ratio"},
        "effects.columns": {"events1": "vacc_tb", "total1": "nt", "events2": "ctrl_tb", "total2": "nc"},
        "model": {"moderators": "latitude_abs", "method": "No_Heterogeneity"},
        "export": {"formats": ["csv"], "report": False},
    }), encoding="utf-8")
    with registered(ESTIMATORS, entry):
        fit = envlink.MetaRegression(method="zero", moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
        assert fit.method_ == "ZERO" and fit.tau2_ == 0.0
        # with tau² = 0 the model is weighted least squares with weights 1/v and a known
        # scale of 1 (statsmodels 0.15: WLS(...).fit(cov_type="fixed scale"))
        ref = WLS(bcg["es"], np.column_stack([np.ones(len(bcg)), bcg["latitude_abs"]]),
                  weights=1 / bcg["es_var"]).fit(cov_type="fixed scale")
        assert_allclose(fit.coef_, ref.params, rtol=1e-10)
        assert_allclose(fit.se_, ref.bse, rtol=1e-10)
        # the command line: --method, its --help, and the JSON result
        out = tmp_path / "fit.json"
        assert main(["fit", str(tmp_path / "bcg.csv"), "--effect", "es", "--variance", "es_var",
                     "--moderators", "latitude_abs", "--method", "no_heterogeneity", "--json", str(out)]) == 0
        result = json.loads(out.read_text(encoding="utf-8"))
        assert result["model"]["tau2_method"] == "ZERO" and result["heterogeneity"]["tau2"] == 0.0
        assert_allclose([c["estimate"] for c in result["coefficients"]["table"]], ref.params, rtol=1e-10)
        assert "ZERO (no-heterogeneity)" in _help("fit", capsys)
        # a project file: effects from the counts, then the fit with the new estimator
        run = run_project(project, out=tmp_path / "out", progress=False)
        assert run.fit.method_ == "ZERO" and run.fit.tau2_ == 0.0
        assert_allclose(run.fit.coef_, ref.params, rtol=1e-10)
        assert "| `ZERO` | `no-heterogeneity` |" in ESTIMATORS.doc_table()
    with pytest.raises(InputError, match="'method' parameter of MetaRegression"):
        envlink.MetaRegression(method="zero").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="the key 'model.method' must be one of"):
        load_project(project)


# ------------------------------------------------------------------ effects and export
def raw_proportion(events: Any, total: Any) -> EffectResult:
    """A toy effect kind: the raw proportion x / n, with the binomial variance p (1 − p) / n."""
    x, n = np.asarray(events, dtype=np.float64), np.asarray(total, dtype=np.float64)
    p = x / n
    return EffectResult(p, p * (1 - p) / n, np.full(p.shape, "", dtype=object))


def write_tsv(df: pd.DataFrame, files: dict[str, Path], descriptor: object, name: str) -> None:
    """A toy export format: the table as tab-separated text."""
    df.to_csv(files["tsv"], sep="\t", index=False, lineterminator="\n")


def _studies_project(folder: Path, kind: str = "logit_proportion", formats: tuple[str, ...] = ("csv",)) -> Path:
    (folder / "studies.csv").write_text("lat,lon,when,x,n\n-9.5,-117.2,March 2008,3,20\n"
                                        "-9.6,-117.3,April 2008,0,15\n", encoding="utf-8")  # fmt: skip
    path = folder / "project.toml"
    path.write_text(_toml({
        "studies": {"path": "studies.csv"}, "locate": {"lat": "lat", "lon": "lon", "period": "when"},
        "effects": {"kind": kind}, "effects.columns": {"events": "x", "total": "n"},
        "export": {"formats": list(formats), "report": False},
    }), encoding="utf-8")
    return path


def test_recipe_an_effect_kind(tmp_path: Path) -> None:
    # docs/architecture.md, "Recipe: an effect kind": the function, and the entry _kind()
    # makes: the function named "module:function" (imported on first call), its input
    # roles, its options and whether group_effects computes it
    entry = Entry("raw_proportion", "the raw proportion x / n; inputs events, total; also per group from raw records",
                  obj=LazyFunction(f"{__name__}:raw_proportion"),
                  info={"roles": ("events", "total"), "options": (), "groupwise": True})
    project = _studies_project(tmp_path, kind="Raw-Proportion")
    with registered(EFFECT_KINDS, entry):
        # binomial proportion and variance p (1 − p) / n (common practice): 3 of 20, 0 of 15
        want_p = [3 / 20, 0.0]
        want_v = [0.15 * 0.85 / 20, 0.0]
        out = envlink.effect_sizes(pd.DataFrame({"x": [3, 0], "n": [20, 15]}), "RAW_PROPORTION", events="x", total="n")
        assert_allclose(out["effect"], want_p, rtol=1e-15)
        assert_allclose(out["variance"], want_v, rtol=1e-15)
        groups = envlink.group_effects(pd.DataFrame({"g": ["a"] * 4, "o": [1, 0, 0, 0]}), "g", "raw-proportion",
                                       outcome="o")
        assert_allclose(groups["effect"], [0.25], rtol=1e-15)
        # the package namespace reads the registry: no line in envlink/effects/__init__.py
        assert envlink.effects.raw_proportion is raw_proportion
        # the command line has no option for the kind: `envlink run` reads the project file
        assert main(["run", str(project), "--out", str(tmp_path / "cli"), "--no-progress"]) == 0
        assert_allclose(pd.read_csv(tmp_path / "cli" / "enriched.csv")["effect"], want_p, rtol=1e-15)
        result = run_project(project, out=tmp_path / "out", progress=False)
        assert_allclose(result.table["effect"], want_p, rtol=1e-15)
        assert "| `raw_proportion` |" in EFFECT_KINDS.doc_table()
    with pytest.raises(InputError, match="'kind' parameter of effect_sizes"):
        envlink.effect_sizes(pd.DataFrame({"x": [3], "n": [20]}), "raw_proportion", events="x", total="n")
    with pytest.raises(InputError, match="the key 'effects.kind' must be one of"):
        load_project(project)
    assert not hasattr(envlink.effects, "raw_proportion")


def test_recipe_an_export_format(tmp_path: Path) -> None:
    # docs/architecture.md, "Recipe: an export format": the writer, and the entry _format()
    # makes: the writer named "module:function", the suffix, companions, optional library
    entry = Entry("tsv", "`NAME.tsv`: tab-separated text", obj=LazyFunction(f"{__name__}:write_tsv"),
                  info={"suffix": ".tsv", "needs": None, "companions": (), "case_insensitive_columns": False})
    project = _studies_project(tmp_path, formats=("csv", "TSV"))
    table = pd.DataFrame({"reef": ["Pell", "Orr"], "depth": [1.5, np.nan]})
    with registered(EXPORT_FORMATS, entry):
        paths = envlink.export_table(table, tmp_path / "api", formats=[" Tsv "])
        assert sorted(paths) == ["tsv"] and paths["tsv"].name == "enriched.tsv"
        back = pd.read_csv(paths["tsv"], sep="\t")  # read back with pandas' own reader
        assert back["reef"].tolist() == ["Pell", "Orr"] and back["depth"].isna().tolist() == [False, True]
        assert main(["run", str(project), "--out", str(tmp_path / "cli"), "--no-progress"]) == 0
        cli = tmp_path / "cli"
        assert_allclose(pd.read_csv(cli / "enriched.tsv", sep="\t")["effect"],
                        pd.read_csv(cli / "enriched.csv")["effect"], rtol=1e-15)
        result = run_project(project, out=tmp_path / "out", progress=False)
        assert sorted(result.paths) == ["csv", "datapackage", "tsv"]
        assert "| `tsv` |" in EXPORT_FORMATS.doc_table()
    with pytest.raises(InputError, match="'formats' parameter of export_table must be a list of [^;]*; got 'tsv'"):
        envlink.export_table(table, tmp_path / "refused", formats=["tsv"])
    with pytest.raises(InputError, match="the key 'export.formats' must be a list"):
        load_project(project)

