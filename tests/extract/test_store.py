"""The cell-series store: values as read from the file, reuse by any later request, safety.

Reference values come from the netCDF4 library reading the file's variable directly
(raw array indexing, outside envlink), and window means from plain NumPy on those
raw series (common practice). Float32 series read through the store are compared bit
for bit with that raw read; means, which add arithmetic, to 1e-9.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_allclose, assert_array_equal

import envlink
from envlink.errors import CacheWarning
from envlink.extract import reader
from envlink.extract.segments import SUFFIX, read_segment
from envlink.extract.store import GridStore, store_limit, store_root

NY, NX, NT = 12, 16, 120  # monthly 1991-2000


def write_grid(path: Path, seed: int = 3, shift: float = 0.0) -> None:
    """A float32 monthly SST-like grid with land cells (fill value) and zlib chunks."""
    rng = np.random.default_rng(seed)
    lat = np.linspace(-5.5, 5.5, NY)
    lon = np.linspace(100.5, 115.5, NX)
    values = (26.0 + shift + rng.standard_normal((NT, NY, NX))).astype(np.float32)
    values[:, 3:5, 6:9] = np.nan  # an island
    ds = xr.Dataset({"sst": (("time", "lat", "lon"), values, {"units": "degC"})},
                    coords={"time": pd.date_range("1991-01-01", periods=NT, freq="MS"), "lat": lat, "lon": lon})
    ds.to_netcdf(path, encoding={"sst": {"zlib": True, "complevel": 1, "chunksizes": (NT, 4, 4),
                                         "_FillValue": np.float32(-999.0)}})


def rows(n: int = 40, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    lat = rng.uniform(-5.9, 5.9, n)
    lon = rng.uniform(100.1, 115.9, n)
    lat[:3], lon[:3] = [-1.5, -0.8, -0.5], [107.0, 107.5, 107.2]  # on the island
    start = rng.integers(0, NT - 24, n)
    months = pd.date_range("1991-01-01", periods=NT + 1, freq="MS")
    end = start + rng.integers(1, 24, n)
    return pd.DataFrame({"site_lat": lat, "site_lon": lon, "period_start": months[start].strftime("%Y-%m-%d"),
                         "period_end": (months[end] - pd.Timedelta(days=1)).strftime("%Y-%m-%d"),
                         "locate_status": "ok"})


@pytest.fixture
def grid_file(tmp_path: Path) -> Path:
    path = tmp_path / "sst.nc"
    write_grid(path)
    return path


def _raw(path: Path) -> np.ndarray:
    """The file's values as the netCDF4 library reads them: float32, fill value as NaN."""
    import netCDF4

    with netCDF4.Dataset(path) as ds:
        v = ds["sst"]
        v.set_auto_mask(False)
        raw = np.asarray(v[:], dtype=np.float32)
    return np.where(raw == np.float32(-999.0), np.float32(np.nan), raw)


def _segments(cache: Path) -> list[Path]:
    return sorted(store_root(cache).glob(f"*/*{SUFFIX}"))


def _no_grid_reads(monkeypatch: pytest.MonkeyPatch) -> None:
    def refuse(*args: object, **kwargs: object) -> None:
        raise AssertionError("the grid was read")

    monkeypatch.setattr(reader, "read_cells_near_gaps", refuse)


def test_stored_series_are_the_files_values_bit_for_bit(grid_file: Path, tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    out = envlink.attach(rows(), envlink.open_grid(grid_file), name="v", spatial="nearest-valid:150km",
                         cache_dir=str(cache))
    assert out.attrs["envlink"]["v"]["cells"] == "read" and out.attrs["envlink"]["v"]["store"] == "stored"
    (seg_path,) = _segments(cache)
    seg = read_segment(seg_path)
    raw = _raw(grid_file).reshape(NT, NY * NX)
    assert seg is not None and seg.dtype == np.float32 and seg.cells.size > 0
    # float32 bit for bit: the raw netCDF4 read of each stored cell (no arithmetic between)
    assert_array_equal(seg.rows(np.arange(seg.cells.size)).view(np.uint32), raw[:, seg.cells].T.view(np.uint32))
    # the island's cells are known to hold no data, kept as such rather than as series
    island = (np.arange(3, 5)[:, None] * NX + np.arange(6, 9)[None, :]).ravel()
    assert set(seg.empty) & set(island) and not set(seg.cells) & set(island)


def test_any_later_request_reads_only_the_store(grid_file: Path, tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    cache = str(tmp_path / "cache")
    t = rows()
    grid = envlink.open_grid(grid_file)
    first = envlink.attach(t, grid, name="v", spatial="nearest-valid:150km", cache_dir=cache)
    assert first["v_flags"].str.contains("nearest_valid_").any()  # island sites moved to a sea cell
    direct = {}
    asks = [dict(stat="max", window="lag:3M"), dict(stat="anomaly", baseline="1991-1995"),
            dict(stat="above:26.5", window="around-mid:12M"), dict(stat="std", window="before-start:6M")]
    for k, kw in enumerate(asks):
        direct[k] = envlink.attach(t, grid, name="v", spatial="nearest-valid:150km", **kw)
    _no_grid_reads(monkeypatch)
    again = envlink.attach(t, grid, name="v", spatial="nearest-valid:150km", cache_dir=cache)
    assert again.attrs["envlink"]["v"]["cells"] == "store"
    assert again.attrs["envlink"]["v"]["store"] == "unchanged"
    assert_array_equal(again["v"].to_numpy(), first["v"].to_numpy())  # the same arithmetic on the same series
    assert again["v_flags"].tolist() == first["v_flags"].tolist()
    for k, kw in enumerate(asks):  # other statistics, windows, baselines, thresholds, lags
        got = envlink.attach(t, grid, name="v", spatial="nearest-valid:150km", cache_dir=cache, **kw)
        assert got.attrs["envlink"]["v"]["cells"] == "store", kw
        assert_array_equal(got["v"].to_numpy(), direct[k]["v"].to_numpy())
        assert got["v_flags"].tolist() == direct[k]["v_flags"].tolist()
    more = pd.concat([t, t.iloc[::-1]], ignore_index=True)  # more rows at cells already read
    got = envlink.attach(more, grid, name="v", spatial="nearest", cache_dir=cache)
    assert got.attrs["envlink"]["v"]["cells"] == "store"


def test_values_match_raw_netcdf4_means(grid_file: Path, tmp_path: Path) -> None:
    # whole-month windows of a monthly grid: the duration-weighted mean from the raw read
    t = rows()
    t = t[(t.site_lat.abs() > 0.1)].iloc[3:].reset_index(drop=True)  # sea cells only
    grid = envlink.open_grid(grid_file)
    for _ in range(2):  # read, then from the store
        out = envlink.attach(t, grid, name="v", cache_dir=str(tmp_path / "cache"))
    assert out.attrs["envlink"]["v"]["cells"] == "store"
    raw = _raw(grid_file).astype(np.float64)
    months = pd.date_range("1991-01-01", periods=NT + 1, freq="MS")
    days = np.diff(months.values).astype("timedelta64[D]").astype(float)
    lat, lon = np.linspace(-5.5, 5.5, NY), np.linspace(100.5, 115.5, NX)
    for r, v in zip(t.itertuples(), out["v"], strict=True):
        iy, ix = int(np.argmin(abs(lat - r.site_lat))), int(np.argmin(abs(lon - r.site_lon)))
        m0 = months.get_loc(pd.Timestamp(r.period_start))
        m1 = months.get_loc(pd.Timestamp(r.period_end) + pd.Timedelta(days=1))
        s, w = raw[m0:m1, iy, ix], days[m0:m1]
        assert_allclose(v, np.sum(s * w) / np.sum(w), rtol=0, atol=1e-9)


def test_a_file_changed_under_the_same_name_is_read_again(grid_file: Path, tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    t = rows()
    before = envlink.attach(t, envlink.open_grid(grid_file), name="v", cache_dir=str(cache))
    (old,) = [p.parent for p in _segments(cache)]
    time.sleep(0.01)
    write_grid(grid_file, shift=3.0)  # other values, same name
    after = envlink.attach(t, envlink.open_grid(grid_file), name="v", cache_dir=str(cache))
    assert after.attrs["envlink"]["v"]["cells"] == "read"
    ok = np.isfinite(before["v"].to_numpy())
    assert_allclose(after["v"].to_numpy()[ok], before["v"].to_numpy()[ok] + 3.0, rtol=0, atol=1e-5)
    assert not old.exists()  # the store of the file's old contents is gone
    assert len({p.parent for p in _segments(cache)}) == 1


def _cli(grid: Path, table: Path, out: Path, cache: Path, **env: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [sys.executable, "-m", "envlink", "attach", str(table), "--grid", str(grid), "--name", "v",
         "--spatial", "nearest-valid:150km", "-o", str(out), "--force", "--no-progress"],
        env={**os.environ, "ENVLINK_CACHE": str(cache), **env}, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
    )


def _pause(folder: Path, seconds: float) -> dict[str, str]:
    """The write-pause test hook (envlink.core.util.pause_for_tests) on the store's segments."""
    return {"ENVLINK_TEST_PAUSE_WRITE": str(folder / ".paused"), "ENVLINK_TEST_PAUSE_MATCH": SUFFIX,
            "ENVLINK_TEST_PAUSE_SECONDS": str(seconds)}


def test_a_run_killed_while_writing_the_store_leaves_a_store_the_next_run_reads(
        grid_file: Path, tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    rows().to_csv(tmp_path / "t.csv", index=False)
    proc = _cli(grid_file, tmp_path / "t.csv", tmp_path / "o.csv", cache, **_pause(tmp_path, 60))
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and not list(store_root(cache).glob("*/.tmp-*")):
            assert proc.poll() is None, proc.stderr.read() if proc.stderr else ""
            time.sleep(0.02)
        assert list(store_root(cache).glob("*/.tmp-*")), "the segment was never being written"
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    assert not _segments(cache)  # killed before the rename: no segment, only the temporary file
    grid = envlink.open_grid(grid_file)
    out = envlink.attach(rows(), grid, name="v", spatial="nearest-valid:150km", cache_dir=str(cache))
    assert out.attrs["envlink"]["v"]["cells"] == "read" and out.attrs["envlink"]["v"]["store"] == "stored"
    assert not list(store_root(cache).glob("*/.tmp-*"))  # the dead run's temporary file was removed
    ref = envlink.attach(rows(), grid, name="v", spatial="nearest-valid:150km")
    assert_array_equal(out["v"].to_numpy(), ref["v"].to_numpy())


def test_two_runs_at_once_on_one_store_give_the_results_of_one(grid_file: Path, tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    rows().to_csv(tmp_path / "t.csv", index=False)
    procs = [_cli(grid_file, tmp_path / "t.csv", tmp_path / f"o{k}.csv", cache, **_pause(tmp_path, 0.5))
             for k in range(2)]
    for p in procs:
        assert p.wait(timeout=300) == 0, p.stderr.read() if p.stderr else ""
    ref = envlink.attach(rows(), envlink.open_grid(grid_file), name="v", spatial="nearest-valid:150km")
    for k in range(2):
        got = pd.read_csv(tmp_path / f"o{k}.csv", keep_default_na=False, na_values=[""])
        assert_allclose(got["v"].to_numpy(float), ref["v"].to_numpy(), rtol=0, atol=0, equal_nan=True)
        assert got["v_flags"].fillna("").tolist() == ref["v_flags"].fillna("").tolist()
    assert 1 <= len(_segments(cache)) <= 2  # at worst the same cells twice
    again = envlink.attach(rows(), envlink.open_grid(grid_file), name="v", spatial="nearest-valid:150km",
                           cache_dir=str(cache))
    assert again.attrs["envlink"]["v"]["cells"] == "store"
    assert_array_equal(again["v"].to_numpy(), ref["v"].to_numpy())


def test_least_recently_used_segments_go_first_and_the_store_keeps_under_its_limit(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    cache = tmp_path / "cache"
    paths = []
    for k in range(4):
        paths.append(tmp_path / f"g{k}.nc")
        write_grid(paths[-1], seed=k)
    t = rows()
    grids = [envlink.open_grid(p) for p in paths]
    envlink.attach(t, grids[0], name="v", cache_dir=str(cache))
    one = sum(p.stat().st_size for p in _segments(cache))
    limit = int(2.5 * one)  # room for two grids' segments
    monkeypatch.setenv("ENVLINK_STORE_MAX", str(limit))
    envlink.attach(t, grids[1], name="v", cache_dir=str(cache))
    time.sleep(0.05)
    assert envlink.attach(t, grids[0], name="v", cache_dir=str(cache)).attrs["envlink"]["v"]["cells"] == "store"
    time.sleep(0.05)  # grid 0 is now used more recently than grid 1
    envlink.attach(t, grids[2], name="v", cache_dir=str(cache))
    assert sum(p.stat().st_size for p in _segments(cache)) <= limit
    kept = {envlink.attach(t, g, name="v", cache_dir=str(cache)).attrs["envlink"]["v"]["cells"]
            for g in grids[:1]}
    assert kept == {"store"}
    assert GridStore.for_grid(grids[1], str(cache)).segments == []  # the least recently used went
    monkeypatch.setenv("ENVLINK_STORE_MAX", "10")  # smaller than one segment: nothing is stored
    out = envlink.attach(t, grids[3], name="v", cache_dir=str(cache))
    assert out.attrs["envlink"]["v"]["store"] == "over limit"
    assert store_limit("2G") == 2 * 2**30


def test_many_small_segments_are_merged(grid_file: Path, tmp_path: Path) -> None:
    cache = str(tmp_path / "cache")
    grid = envlink.open_grid(grid_file)
    t = rows(60)
    for k in range(10):  # each run reads cells no earlier run read
        envlink.attach(t.iloc[6 * k : 6 * k + 6], grid, name="v", cache_dir=cache)
    assert len(_segments(Path(cache))) <= 8
    ref = envlink.attach(t, grid, name="v")
    got = envlink.attach(t, grid, name="v", cache_dir=cache)
    assert got.attrs["envlink"]["v"]["cells"] == "store"
    assert_array_equal(got["v"].to_numpy(), ref["v"].to_numpy())


def test_a_damaged_segment_is_removed_and_its_cells_read_again(grid_file: Path, tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    grid = envlink.open_grid(grid_file)
    ref = envlink.attach(rows(), grid, name="v", cache_dir=str(cache))
    (seg,) = _segments(cache)
    seg.write_bytes(seg.read_bytes()[:-100])  # truncated
    got = envlink.attach(rows(), grid, name="v", cache_dir=str(cache))
    assert got.attrs["envlink"]["v"]["cells"] == "read"
    assert_array_equal(got["v"].to_numpy(), ref["v"].to_numpy())
    assert [read_segment(p) is not None for p in _segments(cache)] == [True]


def test_a_cache_that_cannot_be_written_warns_and_the_run_goes_on(grid_file: Path, tmp_path: Path) -> None:
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("a regular file\n")  # no folder can be made under it, even as root
    grid = envlink.open_grid(grid_file)
    with pytest.warns(CacheWarning, match=r"cache at '.*not_a_folder.*' could not be written .*not cached"):
        out = envlink.attach(rows(), grid, name="v", cache_dir=str(blocker / "cache"))
    assert out.attrs["envlink"]["v"]["store"] == "not stored"
    assert_array_equal(out["v"].to_numpy(), envlink.attach(rows(), grid, name="v")["v"].to_numpy())


def test_grids_in_memory_are_not_stored(tmp_path: Path) -> None:
    from envlink.testing import make_grid

    g = make_grid(lat=[0.5, 1.5], lon=[0.5, 1.5], periods=12, seed=1)
    t = pd.DataFrame({"site_lat": [1.0], "site_lon": [1.0], "period_start": ["2000-01-01"],
                      "period_end": ["2000-03-31"]})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = envlink.attach(t, g, name="v", cache_dir=str(tmp_path / "cache"))
    assert out.attrs["envlink"]["v"]["store"] == "off" and not (tmp_path / "cache").exists()
