"""Statistics, windows, spatial rules and time weights: accepted and refused alike by every interface.

The Python API (``envlink.attach``), the command line (``envlink attach``: exit 0 or
2) and the project file (``envlink.load_project``) read the same registries, so each
spelling below is accepted by all three or refused by all three, and an accepted one
is recorded under the same canonical label in the provenance of the values. The
spelling policy (case, ``-`` = ``_``, white space, ``km`` optional, numbers in any
decimal form) is that of :mod:`envlink.core.registry` and docs/extract.md. A new
statistic or spatial rule registered at run time goes through the same interfaces:
tests/test_recipes.py carries out the recipes of docs/architecture.md.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import envlink
import envlink.extract.attach as attach_module
from envlink.cli import main
from envlink.errors import InputError
from envlink.extract.rules import SPATIAL_RULES
from envlink.extract.statistics import STATISTICS
from envlink.extract.windows import TIME_WEIGHTS, WINDOWS

# (parameter, accepted spelling -> canonical label, refused spellings)
VOCABULARIES: dict[str, tuple[dict[str, str], list[str]]] = {
    "stat": (
        {
            "mean": "mean", "MEAN": "mean", " Mean ": "mean", "min": "min", "max": "max", "sum": "sum",
            "std": "std", "quantile:.5": "quantile:0.5", "quantile:0.5": "quantile:0.5",
            "Quantile: 0.50": "quantile:0.5", "quantile:5e-1": "quantile:0.5", "quantile:1": "quantile:1",
            "above:29": "above:29", "above:29.0": "above:29", "Degree_Days:28": "degree-days:28",
            "degree-days:-1.5": "degree-days:-1.5", "anomaly": "anomaly", "mmm": "mmm",
            "dhw-max": "dhw-max", "DHW_Max": "dhw-max",
        },
        ["bogus", "quantile:1.5", "quantile:-0.1", "quantile", "quantile:x", "quantile:nan", "above",
         "above:inf", "mean:3", "avg", "degree days:28", ""],
    ),
    "window": (
        {
            "period": "period", "PERIOD": "period", "lag:3M": "lag:3M", "lag:3m": "lag:3M",
            "Lag: 3 m": "lag:3M", "lag:90d": "lag:90D", "before_start:90D": "before-start:90D",
            "after-end:1y": "after-end:1Y", "around-mid:6M": "around-mid:6M",
        },
        ["lag:0M", "lag:3W", "lag:-1M", "lag", "lag:1.5M", "lagg:3M", "period:1M", "bogus", "lag:3"],
    ),
    "spatial": (
        {
            "nearest": "nearest", "NEAREST": "nearest", "bilinear": "bilinear",
            "nearest-valid:60": "nearest-valid:60km", "nearest-valid:60km": "nearest-valid:60km",
            "Nearest_Valid:60KM": "nearest-valid:60km", "nearest-valid: 60 km": "nearest-valid:60km",
            "buffer:25.5km": "buffer:25.5km", "buffer:25.50": "buffer:25.5km", "polygon": "polygon",
        },
        ["buffer:0km", "buffer:-5km", "nearest-valid", "nearest-valid:abc", "nearest:5km", "polygon:1",
         "bogus", "nearest valid:60", "buffer:5mi"],
    ),
    "time_weights": (
        {"duration": "duration", "Duration": "duration", " EQUAL ": "equal", "equal": "equal"},
        ["days", "equal:1", "", "durations", "weighted"],
    ),
}
CASES = [(param, text, True) for param, (ok, _) in VOCABULARIES.items() for text in ok] + [
    (param, text, False) for param, (_, bad) in VOCABULARIES.items() for text in bad
]


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A daily grid (every statistic can run on it) as a netCDF file, a located table,
    and the studies table of a project."""
    d = tmp_path_factory.mktemp("vocabulary")
    days = pd.date_range("2000-01-01", "2001-12-31", freq="D")
    doy = days.day_of_year.to_numpy()[:, None, None]
    cell = np.arange(9.0).reshape(1, 3, 3)
    values = 28.0 + 2.0 * np.sin(2 * np.pi * doy / 365.25) + 0.1 * cell
    xr.Dataset(
        {"sst": (("time", "lat", "lon"), values, {"units": "degC"})},
        coords={"time": days, "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5, 12.5]},
    ).to_netcdf(d / "daily.nc")
    located = pd.DataFrame({
        "site_lat": [1.2, 2.1], "site_lon": [11.7, 10.9], "period_start": ["2001-03-01", "2001-06-10"],
        "period_end": ["2001-05-31", "2001-08-20"], "locate_status": ["ok", "ok"],
    })  # fmt: skip
    located.to_csv(d / "located.csv", index=False)
    pd.DataFrame({"lat": [1.2, 2.1], "lon": [11.7, 10.9], "when": ["2001-03-01/2001-05-31", "2001-06-10/2001-08-20"],
                  "sick": [3, 5], "seen": [20, 30]}).to_csv(d / "studies.csv", index=False)
    return d


@pytest.fixture(scope="module")
def grid(files: Path) -> xr.DataArray:
    return envlink.open_grid(files / "daily.nc")


def _api(files: Path, grid: xr.DataArray, param: str, text: str) -> str | None:
    """The label the API records, or None when it refuses ``text``."""
    table = pd.read_csv(files / "located.csv")
    try:
        out = envlink.attach(table, grid, name="v", **{param: text})
    except InputError:
        return None
    return str(out.attrs["envlink"]["v"][param])


@pytest.fixture
def spy(monkeypatch: pytest.MonkeyPatch) -> Iterator[list[dict[str, Any]]]:
    """Provenance of every covariate the command line or a project attaches."""
    seen: list[dict[str, Any]] = []
    real, real_many = attach_module.attach, attach_module.attach_many

    def recording(*args: Any, **kwargs: Any) -> pd.DataFrame:
        out = real(*args, **kwargs)
        seen.append(out.attrs["envlink"][kwargs["name"]])
        return out

    def recording_many(table: pd.DataFrame, grid: Any, covariates: Any, **kwargs: Any) -> pd.DataFrame:
        out = real_many(table, grid, covariates, **kwargs)
        names = [c["name"] if isinstance(c, dict) else c.partition("=")[0].strip() for c in covariates]
        seen.extend(out.attrs["envlink"][n] for n in names)
        return out

    # envlink's own names first: read lazily, they would otherwise be taken from the
    # patched module and "restored" to the recordings after the test
    monkeypatch.setattr(envlink, "attach", recording)
    monkeypatch.setattr(envlink, "attach_many", recording_many)
    monkeypatch.setattr(attach_module, "attach", recording)
    monkeypatch.setattr(attach_module, "attach_many", recording_many)
    yield seen


def _cli(files: Path, tmp_path: Path, param: str, text: str) -> int:
    return main(["attach", str(files / "located.csv"), "--grid", str(files / "daily.nc"), "--name", "v",
                 f"--{param.replace('_', '-')}={text}", "-o", str(tmp_path / "out.csv"), "--force", "--no-cache"])


def _project_text(covariates: list[dict[str, str]]) -> str:
    blocks = "".join(
        "\n[[covariates]]\n" + "".join(f"{k} = {json.dumps(v)}\n" for k, v in cov.items()) for cov in covariates
    )
    return (
        '[studies]\npath = "studies.csv"\n\n[locate]\nlat = "lat"\nlon = "lon"\nperiod = "when"\n\n'
        '[grids.sst]\npath = "daily.nc"\n' + blocks
        + '\n[effects]\nkind = "logit_proportion"\n\n[effects.columns]\nevents = "sick"\ntotal = "seen"\n\n'
        '[export]\nformats = ["csv"]\nreport = false\n'
    )


def _project_accepts(files: Path, tmp_path: Path, param: str, text: str) -> bool:
    path = tmp_path / "p.toml"
    path.write_text(_project_text([{"name": "v", "grid": "sst", param: text}]), encoding="utf-8")
    for name in ("studies.csv", "daily.nc"):
        if not (tmp_path / name).exists():
            (tmp_path / name).symlink_to(files / name)
    try:
        envlink.load_project(path)
    except InputError:
        return False
    return True


@pytest.mark.parametrize(("param", "text", "accepted"), CASES)
def test_api_cli_and_project_accept_and_refuse_alike(files: Path, grid: xr.DataArray, tmp_path: Path,
                                                     spy: list[dict[str, Any]], param: str, text: str,
                                                     accepted: bool, capsys: pytest.CaptureFixture[str]) -> None:
    label = _api(files, grid, param, text)
    spy.clear()
    rc = _cli(files, tmp_path, param, text)
    err = capsys.readouterr().err
    in_project = _project_accepts(files, tmp_path, param, text)
    assert (label is not None, rc, in_project) == (accepted, 0 if accepted else 2, accepted), err
    if accepted:
        assert label == VOCABULARIES[param][0][text]
        assert [p[param] for p in spy] == [label]  # the command line recorded the same label
    else:
        # the command line names the option in place of the Python parameter
        option = "--" + param.replace("_", "-")
        assert f"The option {option} must be" in err and "parameter of attach" not in err


def test_a_project_records_the_canonical_labels(files: Path, tmp_path: Path, spy: list[dict[str, Any]]) -> None:
    # every accepted spelling as one covariate of one project, run end to end
    covs, want = [], []
    for param, (ok, _) in VOCABULARIES.items():
        for k, (text, label) in enumerate(ok.items()):
            covs.append({"name": f"{param}_{k}", "grid": "sst", param: text})
            want.append((param, label))
    for name in ("studies.csv", "daily.nc"):
        (tmp_path / name).symlink_to(files / name)
    (tmp_path / "p.toml").write_text(_project_text(covs), encoding="utf-8")
    result = envlink.run_project(tmp_path / "p.toml", out=tmp_path / "out", progress=False)
    assert [p[param] for p, (param, _) in zip(spy, want, strict=True)] == [label for _, label in want]
    assert all(c["name"] in result.table.columns for c in covs)


def test_help_and_messages_come_from_the_registries(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["attach", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    for reg in (STATISTICS, WINDOWS, SPATIAL_RULES, TIME_WEIGHTS):
        assert reg.help_text() in text
    from envlink.project.schema import SECTIONS

    keys = SECTIONS["covariates[]"]
    assert (keys["stat"].allowed, keys["window"].allowed, keys["spatial"].allowed, keys["time_weights"].allowed) == (
        STATISTICS.allowed(), WINDOWS.allowed(), SPATIAL_RULES.allowed(), TIME_WEIGHTS.allowed())



# Covariate names: one rule (envlink.core.columns.COVARIATE_NAME_RULE, the rule the
# project file always had, docs/project-file.md) for the API, the command line and a
# project file; a name becomes a column and a term of a model's moderators.
NAMES = [("sst", True), ("sst_lag3", True), ("_x", True), ("SST2", True), ("bad name", False),
         ("sst-mean", False), ("3m", False), ("sst.mean", False), ("sst\n", False), ("", False)]


@pytest.mark.parametrize(("name", "accepted"), NAMES)
def test_covariate_names_accepted_and_refused_alike(files: Path, grid: xr.DataArray, tmp_path: Path, name: str,
                                                    accepted: bool, capsys: pytest.CaptureFixture[str]) -> None:
    table = pd.read_csv(files / "located.csv")
    api = []
    for call in (lambda: envlink.attach(table, grid, name=name),
                 lambda: envlink.attach_many(table, grid, [{"name": name, "stat": "mean"}]),
                 lambda: envlink.attach_many(table, grid, [f"{name}=mean"])):
        try:
            call()
            api.append(True)
        except InputError:
            api.append(False)
    base = ["attach", str(files / "located.csv"), "--grid", str(files / "daily.nc"), "-o", str(tmp_path / "o.csv"),
            "--force", "--no-cache"]
    rcs = [main([*base, "--name", name]), main([*base, "--covariate", f"{name}=mean"])]
    err = capsys.readouterr().err
    path = tmp_path / "p.toml"
    path.write_text(_project_text([{"name": name, "grid": "sst"}]), encoding="utf-8")
    for f in ("studies.csv", "daily.nc"):
        (tmp_path / f).symlink_to(files / f)
    try:
        envlink.load_project(path)
        in_project = True
    except InputError:
        in_project = False
    want = 0 if accepted else 2
    # text form strips the blanks around a name (docs/extract.md), so "sst\n=mean" is "sst"
    text_form = accepted or name == "sst\n"
    assert (api, rcs, in_project) == ([accepted, accepted, text_form], [want, 0 if text_form else 2], accepted), err
    if not accepted:
        assert "letters, digits and '_'" in err
    if not text_form and name:  # envlink impute reads --covariate as attach does
        assert main(["impute", str(files / "located.csv"), "--grid", str(files / "daily.nc"), "--covariate",
                     f"{name}=mean", "--effect", "e", "--variance", "v"]) == 2
        assert "letters, digits and '_'" in capsys.readouterr().err
