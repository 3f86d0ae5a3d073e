"""A grid that fails while its cells are read is a GridError at the reader, naming the file.

The grid is written with netCDF4, opened with envlink.open_grid (lazily: the values
stay in the file), then the file is truncated on disk before the values are read,
as when a file is replaced or cut short while a run goes on.
"""

from __future__ import annotations

import os
from pathlib import Path

import netCDF4
import numpy as np
import pandas as pd
import pytest

import envlink
from envlink.cli import main
from envlink.errors import GridError


def _write(path: Path) -> Path:
    months = pd.date_range("2000-01-01", periods=60, freq="MS")
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", months.size)
        ds.createDimension("lat", 8)
        ds.createDimension("lon", 8)
        t = ds.createVariable("time", "f8", ("time",))
        t.units = "days since 2000-01-01"
        t[:] = (months - months[0]).days.to_numpy()
        for name, units in (("lat", "degrees_north"), ("lon", "degrees_east")):
            v = ds.createVariable(name, "f8", (name,))
            v.units = units
            v[:] = np.arange(8) + 0.5
        sst = ds.createVariable("sst", "f4", ("time", "lat", "lon"), zlib=True, chunksizes=(60, 4, 4))
        sst.units = "degC"
        sst[:] = np.random.default_rng(1).normal(27.0, 1.0, (months.size, 8, 8))
    return path


def _truncate(path: Path) -> None:
    with open(path, "r+b") as fh:
        fh.truncate(os.path.getsize(path) // 2)


def _located() -> pd.DataFrame:
    return pd.DataFrame({"site_lat": [6.5], "site_lon": [6.5], "period_start": ["2002-01-01"],
                         "period_end": ["2002-12-31"], "locate_status": ["ok"]})


def test_truncated_file_is_a_grid_error_naming_the_file(tmp_path: Path) -> None:
    path = _write(tmp_path / "sst.nc")
    grid = envlink.open_grid(path)
    _truncate(path)
    with pytest.raises(GridError, match=r"Cannot read the grid '.*sst\.nc' \(variable 'sst', cells at lat "
                                        r"index 6, lon index 6, all 60 time steps\): .*check it with"):
        envlink.attach(_located(), grid, name="v")


def test_cli_exit_1_naming_the_grid_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    import envlink.commands.attach as command

    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    path = _write(tmp_path / "sst.nc")
    _located().to_csv(tmp_path / "located.csv", index=False)
    opened = command._open

    def open_then_truncate(source: str, variable: str | None = None, **options: object) -> object:
        grid = opened(source, variable, **options)
        _truncate(path)  # the file is cut short after envlink opened it
        return grid

    monkeypatch.setattr(command, "_open", open_then_truncate)
    rc = main(["attach", str(tmp_path / "located.csv"), "--grid", str(path), "--name", "v",
               "-o", str(tmp_path / "out.csv")])
    err = capsys.readouterr().err
    assert rc == 1
    assert f"envlink attach: failed: Cannot read the grid {str(path)!r}" in err
    assert "cannot write" not in err.lower() and not (tmp_path / "out.csv").exists()


def test_project_run_names_the_covariate_and_the_grid_file(tmp_path: Path,
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    path = _write(tmp_path / "sst.nc")
    pd.DataFrame({"lat": [6.5, 5.5], "lon": [6.5, 5.5], "when": ["2002", "2003"], "sick": [3, 4],
                  "seen": [20, 30]}).to_csv(tmp_path / "studies.csv", index=False)
    (tmp_path / "p.toml").write_text(
        '[studies]\npath = "studies.csv"\n\n[locate]\nlat = "lat"\nlon = "lon"\nperiod = "when"\n\n'
        '[grids.sst]\npath = "sst.nc"\n\n[[covariates]]\nname = "sst_mean"\ngrid = "sst"\n\n'
        '[effects]\nkind = "logit_proportion"\n\n[effects.columns]\nevents = "sick"\ntotal = "seen"\n\n'
        '[export]\nformats = ["csv"]\nreport = false\n'
    )
    opened = envlink.open_grid

    def open_then_truncate(source: object, *args: object, **kwargs: object) -> object:
        grid = opened(source, *args, **kwargs)
        _truncate(path)
        return grid

    monkeypatch.setattr(envlink, "open_grid", open_then_truncate)
    with pytest.raises(GridError, match=r"\(covariate 'sst_mean'\): Cannot read the grid '.*sst\.nc'") as info:
        envlink.run_project(tmp_path / "p.toml", out=tmp_path / "out", progress=False)
    assert "Cannot write the outputs" not in str(info.value)
