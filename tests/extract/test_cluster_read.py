"""Attach on a dask.distributed cluster equals attach on this machine, and the workers fill the store.

A ``LocalCluster`` with two worker processes (one thread each) is started once for the
module. References: the single-machine attach of the same rows (identical values and
flags: the same reads and decoding run on the workers), and the grid's values read
directly with xarray from the file (outside envlink's reader), compared bit for bit.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_array_equal

import envlink
from envlink.errors import CacheWarning, InputError
from envlink.extract import cluster_read, reader
from envlink.extract.series import CellSeries
from envlink.extract.store import GridStore

pytestmark = [pytest.mark.requires_dask]

NY, NX, NT = 20, 24, 36
COVS = ["m=mean", "hi=max@lag:3M", "q=quantile:0.9@before-start:6M"]


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                  dashboard_address=":0") as cluster, distributed.Client(cluster) as c:
        yield c


@pytest.fixture(autouse=True)
def small_tiles(monkeypatch):
    """Tiles of one storage chunk each (the grid is tiny), so a read is several tasks."""
    monkeypatch.setattr(reader, "_TILE_BYTES", 1000)


def _dataset(seed: int = 7) -> xr.Dataset:
    rng = np.random.default_rng(seed)
    values = (26.0 + rng.standard_normal((NT, NY, NX))).astype(np.float32)
    values[:, 5:8, 3:7] = np.nan  # land
    values[4:9, 12, 12] = np.nan  # a gap in time
    return xr.Dataset({"sst": (("time", "lat", "lon"), values, {"units": "degC"})},
                      coords={"time": pd.date_range("2001-01-01", periods=NT, freq="MS"),
                              "lat": np.linspace(-9.5, 9.5, NY), "lon": np.linspace(120.5, 143.5, NX)})


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    d = tmp_path_factory.mktemp("cluster")
    ds = _dataset()
    nc, zarr = d / "sst.nc", d / "sst.zarr"
    ds.to_netcdf(nc, encoding={"sst": {"zlib": True, "complevel": 1, "chunksizes": (NT, 5, 6)}})
    ds.to_zarr(zarr, zarr_format=2, consolidated=True, encoding={"sst": {"chunks": (12, 5, 6)}})
    return {"nc": nc, "zarr": zarr}


def _rows(n: int = 60, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    start = pd.Timestamp("2001-09-01") + pd.to_timedelta(rng.integers(0, 300, n), unit="D")
    return pd.DataFrame({"site_lat": rng.uniform(-10.5, 10.5, n), "site_lon": rng.uniform(120.0, 144.5, n),
                         "period_start": start.strftime("%Y-%m-%d"),
                         "period_end": (start + pd.Timedelta(days=200)).strftime("%Y-%m-%d")})


def _same(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert list(a.columns) == list(b.columns)
    for c in a.columns:
        if a[c].dtype.kind == "f":
            assert_array_equal(a[c].to_numpy(), b[c].to_numpy(), err_msg=c)
        else:
            assert a[c].tolist() == b[c].tolist(), c


@pytest.mark.parametrize("kind", ["nc", "zarr"])
def test_attach_many_on_cluster_equals_one_machine_and_fills_the_store(client, files, tmp_path, kind,
                                                                       monkeypatch):
    monkeypatch.setattr(GridStore, "tidy", lambda self, written=None: None)  # keep each worker's segments
    grid = envlink.open_grid(files[kind], "sst")
    rows = _rows()
    one = envlink.attach_many(rows, grid, COVS, spatial="nearest-valid:150km", progress=False)
    cache = tmp_path / "cache"
    on = envlink.attach_many(rows, grid, COVS, spatial="nearest-valid:150km", progress=False, client=client,
                             cache_dir=str(cache))
    _same(one, on)
    assert on.attrs["envlink"]["m"]["cells"] == "read"
    assert on.attrs["envlink"]["m"]["store"] == "stored"
    segments = list((cache / "cells").glob("*/*.cells"))
    writers = {int(p.name.split("-")[2]) for p in segments}  # a segment's name carries its writer's pid
    assert len(segments) >= 8 and len(writers - {os.getpid()}) == 2  # one per task, from both workers
    later = envlink.attach_many(rows, grid, COVS, spatial="nearest-valid:150km", progress=False,
                                cache_dir=str(cache))  # no cluster: served by the workers' segments
    assert later.attrs["envlink"]["m"]["cells"] == "store"
    _same(one, later)


def test_attach_with_an_address_equals_one_machine(client, files):
    grid = envlink.open_grid(files["nc"], "sst")
    rows = _rows(25, seed=2)
    for spatial in ("nearest", "bilinear"):
        one = envlink.attach(rows, grid, name="sst", stat="mean", window="lag:2M", spatial=spatial, progress=False)
        on = envlink.attach(rows, grid, name="sst", stat="mean", window="lag:2M", spatial=spatial, progress=False,
                            client=client.scheduler.address)
        assert on["sst"].notna().sum() == one["sst"].notna().sum() > 0
        _same(one, on)


def test_series_read_on_workers_are_the_file_values(client, files):
    grid = envlink.open_grid(files["nc"], "sst")
    raw = xr.open_dataset(files["nc"])["sst"].values  # read outside envlink's reader
    cells = np.array([0, 7, 131, 250, 251, NY * NX - 1, 12 * NX + 12], dtype=np.int64)
    got = CellSeries(grid, client=client).get(cells)
    iy, ix = np.divmod(cells, NX)
    assert_array_equal(got, raw[:, iy, ix].T)


def test_store_folder_not_seen_by_workers_is_written_by_the_client(client, files, tmp_path, monkeypatch):
    grid = envlink.open_grid(files["nc"], "sst")
    rows = _rows(30, seed=4)
    real = cluster_read._store_spec

    def elsewhere(store, nt, dtype):  # as if the workers mounted another file system
        spec = real(store, nt, dtype)
        return (str(tmp_path / "not-mounted"), *spec[1:]) if spec is not None else None

    monkeypatch.setattr(cluster_read, "_store_spec", elsewhere)
    cache = tmp_path / "cache"
    with pytest.warns(CacheWarning, match="not visible"):
        on = envlink.attach(rows, grid, name="sst", progress=False, client=client, cache_dir=str(cache))
    assert on.attrs["envlink"]["sst"]["store"] == "stored"
    assert not (tmp_path / "not-mounted").exists()
    later = envlink.attach(rows, grid, name="sst", progress=False, cache_dir=str(cache))
    assert later.attrs["envlink"]["sst"]["cells"] == "store"
    _same(on, later)


def test_bad_address_is_an_input_error_naming_the_parameter(files):
    pytest.importorskip("distributed")
    grid = envlink.open_grid(files["nc"], "sst")
    with pytest.raises(InputError, match="No Dask scheduler answers") as info:
        envlink.attach(_rows(3), grid, name="sst", progress=False, client="no-port-here")
    assert info.value.param == "client"


def _cli(*args: str, cache: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "ENVLINK_CACHE": str(cache), "PYTHONPATH": str(Path(envlink.__file__).parents[1])}
    return subprocess.run([sys.executable, "-m", "envlink", "attach", *args], capture_output=True, text=True,
                          env=env, timeout=120)


def test_command_line_scheduler_end_to_end(client, files, tmp_path):
    table = tmp_path / "located.csv"
    _rows(40, seed=9).to_csv(table, index=False)
    common = [str(table), "--grid", str(files["nc"]), "--covariate", "m=mean", "--covariate", "hi=max@lag:3M",
              "--spatial", "nearest-valid:150km", "--no-progress"]
    one = _cli(*common, "-o", str(tmp_path / "one.csv"), "--no-cache", cache=tmp_path / "c1")
    assert one.returncode == 0, one.stderr
    on = _cli(*common, "-o", str(tmp_path / "on.csv"), "--scheduler", client.scheduler.address,
              cache=tmp_path / "c2")
    assert on.returncode == 0, on.stderr
    assert (tmp_path / "on.csv").read_bytes() == (tmp_path / "one.csv").read_bytes()
    assert list((tmp_path / "c2" / "cells").glob("*/*.cells"))  # written by the workers
    bad = _cli(*common, "-o", str(tmp_path / "bad.csv"), "--scheduler", "no-port-here", cache=tmp_path / "c3")
    assert bad.returncode == 2
    assert "--scheduler" in bad.stderr and "Traceback" not in bad.stderr
    assert not (tmp_path / "bad.csv").exists()


def test_plain_attach_does_not_import_distributed(files):
    code = ("import sys, envlink, pandas as pd\n"
            f"g = envlink.open_grid({str(files['nc'])!r}, 'sst')\n"
            "t = pd.DataFrame({'site_lat': [0.0], 'site_lon': [130.0], 'period_start': ['2001-03-01'],"
            " 'period_end': ['2001-05-31']})\n"
            "envlink.attach(t, g, name='sst', progress=False)\n"
            "print('distributed' in sys.modules)\n")
    env = {**os.environ, "PYTHONPATH": str(Path(envlink.__file__).parents[1])}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=60)
    assert out.stdout.strip() == "False", out.stderr


def _project_file(tmp_path: Path, grid: Path, extra: str = "") -> Path:
    rows = _rows(15, seed=6).rename(columns={"site_lat": "lat", "site_lon": "lon", "period_start": "t0",
                                                  "period_end": "t1"})
    rows.to_csv(tmp_path / "studies.csv", index=False)
    text = (f'[project]\ntitle = "on a cluster"\ncache_dir = "cache"\n{extra}\n'
            '[studies]\npath = "studies.csv"\n\n[locate]\nlat = "lat"\nlon = "lon"\n'
            'start = "t0"\nend = "t1"\n\n'
            f'[grids.sst]\npath = {str(grid)!r}\nvariable = "sst"\n\n'
            '[[covariates]]\nname = "sst_mean"\ngrid = "sst"\nstat = "mean"\n\n'
            '[[covariates]]\nname = "sst_lag"\ngrid = "sst"\nstat = "max"\nwindow = "lag:2M"\n\n'
            '[export]\nformats = ["csv"]\nreport = false\n')
    (tmp_path / "p.toml").write_text(text)
    return tmp_path / "p.toml"


def test_project_scheduler_key_equals_one_machine(client, files, tmp_path):
    from envlink.project import run_project

    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    one = run_project(_project_file(tmp_path / "a", files["nc"]), progress=False, cache=False)
    p = _project_file(tmp_path / "b", files["nc"], f"scheduler = {client.scheduler.address!r}")
    on = run_project(p, progress=False)
    _same(one.table, on.table)
    assert list((tmp_path / "b" / "cache" / "cells").glob("*/*.cells"))
    bad = _project_file(tmp_path / "b", files["nc"], 'scheduler = "no-port-here"')
    with pytest.raises(InputError, match=r"p\.toml, line 4: .*No Dask scheduler answers"):
        run_project(bad, progress=False, force=True)


def test_a_file_damaged_after_opening_is_a_grid_error_naming_it(client, tmp_path):
    from envlink.errors import GridError

    path = tmp_path / "cut.nc"
    _dataset().to_netcdf(path, encoding={"sst": {"zlib": True, "chunksizes": (NT, 5, 6)}})
    grid = envlink.open_grid(path, "sst")
    with open(path, "r+b") as fh:  # cut short after envlink opened it: the workers open it again
        fh.truncate(os.path.getsize(path) // 2)
    with pytest.raises(GridError, match=r"Cannot read the grid '.*cut\.nc' \(variable 'sst', cells at lat index"):
        envlink.attach(_rows(10), grid, name="sst", progress=False, client=client)


def test_worker_temporary_files_are_left_to_the_age_rule(tmp_path):
    from envlink.extract.segments import read_segment
    from envlink.extract.storefiles import GRID_FILE, remove_stale

    assert cluster_read._write_segment((str(tmp_path), 2**30, 2, "<f4"), np.array([1]), [np.ones((1, 2))]
                                       ).startswith("not visible")
    (tmp_path / GRID_FILE).write_text("{}")
    cells, empty = cluster_read._write_segment((str(tmp_path), 2**30, 2, "<f4"), np.array([9, 4, 6]),
                                               [np.array([[1.0, 2.0], [np.nan, np.nan], [3.0, np.nan]])])
    assert cells.tolist() == [6, 9] and empty.tolist() == [4]
    seg = read_segment(next(tmp_path.glob("*.cells")))
    assert_array_equal(seg.rows(np.arange(2)), np.array([[3.0, np.nan], [1.0, 2.0]], dtype=np.float32))
    other_host = tmp_path / ".tmp-node7.4242-abc"  # another machine's writer: its pid means nothing here
    dead_here = tmp_path / ".tmp-999999999-abc"
    other_host.write_bytes(b"x")
    dead_here.write_bytes(b"x")
    assert remove_stale(tmp_path) == 1
    assert other_host.exists() and not dead_here.exists()


def _scan_rows(n: int = 48, seed: int = 5) -> pd.DataFrame:
    rows = _rows(n, seed=seed)
    rng = np.random.default_rng(seed)
    return rows.assign(effect=rng.normal(0.2, 0.3, n), variance=rng.uniform(0.02, 0.08, n))


def test_scan_and_imputed_dates_on_cluster_equal_one_machine(client, files, tmp_path, monkeypatch):
    # the window family of a scan and the draws of imputed dates read their cells on the
    # workers (one shared series per grid) and give the one-machine values bit for bit
    from envlink.extract.family import WindowFamily, extract_family
    from envlink.project.impute import impute_dates

    monkeypatch.setattr(GridStore, "tidy", lambda self, written=None: None)  # keep each worker's segments
    grid = envlink.open_grid(files["nc"], "sst")
    rows = _scan_rows()
    family = WindowFamily.make(lags="0..2", spans="1..3", unit="M", stats=["mean", "max"])
    one = extract_family(rows, grid, family, spatial="nearest-valid:150km")
    cache = tmp_path / "cache"
    on = extract_family(rows, grid, family, spatial="nearest-valid:150km", client=client,
                        cache_dir=str(cache))
    assert one.notna().to_numpy().sum() > 0
    _same(one, on)
    writers = {int(p.name.split("-")[2]) for p in (cache / "cells").glob("*/*.cells")}
    assert len(writers - {os.getpid()}) == 2  # written by both workers
    covs = [{"grid": grid, "name": "sst_m", "stat": "mean", "spatial": "nearest-valid:150km"}]
    vague = rows.assign(period_precision="month", locate_flags="", effort=20.0)  # a 20-day sub-window
    here = impute_dates(vague, covs, moderators="sst_m", draws=2, seed=1, effort="effort", progress=False)
    there = impute_dates(vague, covs, moderators="sst_m", draws=2, seed=1, effort="effort", progress=False,
                         client=client.scheduler.address)
    assert here.rules["sub-window"] == len(rows)
    _same(here.draws, there.draws)


def test_command_line_scan_scheduler_equals_one_machine(client, files, tmp_path):
    table = tmp_path / "located.csv"
    _scan_rows(40, seed=8).to_csv(table, index=False)
    env = {**os.environ, "PYTHONPATH": str(Path(envlink.__file__).parents[1])}
    common = ["scan", str(table), "--grid", str(files["nc"]), "--effect", "effect", "--variance",
              "variance", "--lags", "0..2", "--spans", "1..2", "--unit", "M", "--spatial",
              "nearest-valid:150km", "--permutations", "49", "--seed", "3", "--no-progress"]
    outs = {}
    for name, extra in (("one", ["--no-cache"]), ("on", ["--scheduler", client.scheduler.address])):
        done = subprocess.run([sys.executable, "-m", "envlink", *common, *extra, "--json",
                               str(tmp_path / f"{name}.json")], capture_output=True, text=True,
                              env={**env, "ENVLINK_CACHE": str(tmp_path / name)}, timeout=180)
        assert done.returncode == 0, done.stderr
        outs[name] = (tmp_path / f"{name}.json").read_text()
    assert outs["on"] == outs["one"]
    assert list((tmp_path / "on" / "cells").glob("*/*.cells"))  # the workers kept the series
