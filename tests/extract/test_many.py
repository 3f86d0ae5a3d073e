"""Several covariates from one read: attach_many, ``envlink attach --covariate`` and a project.

Every value must equal that of one ``attach`` call per covariate (the same series, the
same arithmetic: compared exactly), and the grid is read once for all of them.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

import envlink
from envlink.cli import main
from envlink.errors import InputError
from envlink.extract import reader

from .test_store import rows, write_grid

COVS = ["m=mean", "hi=max", "lo=min", "sd=std", "lag3=mean@lag:3M", "lag12=mean@lag:12M",
        "mid=mean@around-mid:12M", {"name": "anom", "stat": "anomaly", "baseline": "1991-1995"}]


@pytest.fixture
def grid_file(tmp_path: Path) -> Path:
    path = tmp_path / "sst.nc"
    write_grid(path)
    return path


def _count_reads(monkeypatch: pytest.MonkeyPatch) -> list[int]:
    calls: list[int] = []
    real = reader.read_cells_near_gaps

    def counting(grid, flat, **kwargs):  # noqa: ANN001, ANN202
        calls.append(len(flat))
        return real(grid, flat, **kwargs)

    monkeypatch.setattr(reader, "read_cells_near_gaps", counting)
    return calls


def _singles(t: pd.DataFrame, grid: object, spatial: str) -> pd.DataFrame:
    out = t
    for c in COVS:
        spec = c if isinstance(c, dict) else {"name": c.split("=")[0], "stat": c.split("=")[1].split("@")[0],
                                               "window": (c.split("@") + ["period"])[1]}
        out = envlink.attach(out, grid, spatial=spatial, **spec)
    return out


@pytest.mark.parametrize("spatial", ["nearest", "nearest-valid:150km", "buffer:120km"])
def test_attach_many_equals_one_attach_per_covariate_and_reads_once(grid_file: Path, spatial: str,
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    t = rows()
    grid = envlink.open_grid(grid_file)
    ref = _singles(t, grid, spatial)
    calls = _count_reads(monkeypatch)
    got = envlink.attach_many(t, grid, COVS, spatial=spatial)
    assert len(calls) == 1  # one pass over the grid for the eight covariates
    assert list(got.columns) == list(ref.columns)
    for name in ("m", "hi", "lo", "sd", "lag3", "lag12", "mid", "anom"):
        assert_array_equal(got[name].to_numpy(), ref[name].to_numpy())
        assert got[f"{name}_flags"].tolist() == ref[f"{name}_flags"].tolist()
        assert_array_equal(got[f"{name}_coverage"].to_numpy(), ref[f"{name}_coverage"].to_numpy())
        assert got.attrs["envlink"][name]["cells"] == "read"
    assert got.attrs["envlink"]["anom"]["baseline"] == "1991-1995"


def test_attach_many_refuses_bad_descriptions(grid_file: Path) -> None:
    grid = envlink.open_grid(grid_file)
    with pytest.raises(InputError, match=r"'covariates' parameter of attach_many must be 'NAME=STAT' or"):
        envlink.attach_many(rows(), grid, ["m"])
    with pytest.raises(InputError, match=r"both write the column 'm'"):
        envlink.attach_many(rows(), grid, ["m=mean", "m=max"])
    with pytest.raises(InputError, match=r"'stat' parameter of attach must be .*got 'meen'") as info:
        envlink.attach_many(rows(), grid, ["m=mean", "x=meen"])
    assert info.value.covariate == 1  # type: ignore[attr-defined]


def test_command_line_covariates(grid_file: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rows().to_csv(tmp_path / "t.csv", index=False)
    args = ["attach", str(tmp_path / "t.csv"), "--grid", str(grid_file), "-o", str(tmp_path / "o.csv"),
            "--spatial", "nearest-valid:150km", "--no-progress"]
    specs = [c for c in COVS if isinstance(c, str)]
    assert main([*args, *(x for c in specs for x in ("--covariate", c))]) == 0
    err = capsys.readouterr().err
    assert "lag12:" in err and "read from the grid" in err
    got = pd.read_csv(tmp_path / "o.csv")
    ref = envlink.attach_many(rows(), envlink.open_grid(grid_file), specs, spatial="nearest-valid:150km")
    for c in specs:
        name = c.split("=")[0]
        np.testing.assert_allclose(got[name], ref[name], rtol=1e-15, equal_nan=True)
    # --covariate with --name or --stat is bad usage; so is a misspelt statistic
    assert main([*args, "--force", "--covariate", "a=mean", "--name", "b"]) == 2
    assert "either --covariate" in capsys.readouterr().err
    assert main([*args, "--force", "--covariate", "a=meen"]) == 2
    err = capsys.readouterr().err
    assert "--covariate 'a=meen': the statistic must be one of 'mean'" in err
    assert "Did you mean 'mean'?" in err
    assert main([*args, "--force", "--covariate", "a=mean@lagg:3M"]) == 2
    assert "--covariate 'a=mean@lagg:3M': the window must be" in capsys.readouterr().err
    assert main([*args, "--force", "--covariate", "a"]) == 2
    assert "--covariate 'a': write 'NAME=STAT' or 'NAME=STAT@WINDOW'" in capsys.readouterr().err


def test_a_project_reads_each_grid_once_for_all_its_covariates(grid_file: Path, tmp_path: Path,
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    t = rows()
    pd.DataFrame({"lat": t.site_lat, "lon": t.site_lon, "start": t.period_start, "end": t.period_end}).to_csv(
        tmp_path / "s.csv", index=False)
    blocks = "".join(
        f'\n[[covariates]]\nname = "{c.split("=")[0]}"\ngrid = "sst"\nstat = "{c.split("=")[1].split("@")[0]}"\n'
        + (f'window = "{c.split("@")[1]}"\n' if "@" in c else "") + 'spatial = "nearest-valid:150km"\n'
        for c in COVS if isinstance(c, str))
    (tmp_path / "p.toml").write_text(
        '[studies]\npath = "s.csv"\n[locate]\nlat = "lat"\nlon = "lon"\nstart = "start"\nend = "end"\n'
        '[grids.sst]\npath = "sst.nc"\n' + blocks + '\n[export]\nformats = ["csv"]\nreport = false\n')
    calls = _count_reads(monkeypatch)
    first = envlink.run_project(tmp_path / "p.toml", out=tmp_path / "out", progress=False)
    assert len(calls) == 1
    names = [c.split("=")[0] for c in COVS if isinstance(c, str)]
    assert [c for c in first.table.columns if c in names] == names  # the file's order
    again = envlink.run_project(tmp_path / "p.toml", out=tmp_path / "out", progress=False, force=True)
    assert len(calls) == 1  # the second run reads only the store
    for n in names:
        assert_array_equal(again.table[n].to_numpy(), first.table[n].to_numpy())


def test_calls_sharing_one_cell_series_read_each_cell_once(grid_file: Path, tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    # one table of periods per candidate window (as a window scan makes them): one read
    from envlink.extract.series import CellSeries
    from envlink.extract.store import GridStore

    grid = envlink.open_grid(grid_file)
    t = rows()
    shifted = t.assign(period_start=(pd.to_datetime(t.period_start) - pd.DateOffset(months=2)).dt.strftime("%Y-%m-%d"))
    ref = [envlink.attach_many(x, grid, ["m=mean"], spatial="nearest-valid:150km") for x in (t, shifted)]
    calls = _count_reads(monkeypatch)
    cs = CellSeries(grid, GridStore.for_grid(grid, str(tmp_path / "cache")))
    got = [envlink.attach_many(x, grid, ["m=mean"], spatial="nearest-valid:150km", series=cs) for x in (t, shifted)]
    assert len(calls) == 1 and cs.flush() == "stored"
    for a, b in zip(got, ref, strict=True):
        assert_array_equal(a["m"].to_numpy(), b["m"].to_numpy())
        assert a.attrs["envlink"]["m"]["store"] == "shared"
