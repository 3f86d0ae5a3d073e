"""The cell reader on contiguous and chunked netCDF files, default open_grid chunks."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
from numpy.testing import assert_array_equal

from envlink.extract import reader
from envlink.extract.stats import _ranges
from envlink.grids.open import open_grid


def _write(path, layout: str) -> np.ndarray:
    nt, ny, nx = 12, 30, 40
    values = np.random.default_rng(5).normal(15.0, 2.0, (nt, ny, nx)).astype(np.float32)
    values[:, 10:14, 20:25] = np.nan
    with netCDF4.Dataset(path, "w") as ds:
        for d, n in zip(("time", "lat", "lon"), (nt, ny, nx), strict=True):
            ds.createDimension(d, n)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.calendar = "days since 2001-01-01", "standard"
        months = pd.date_range("2001-01-01", periods=nt, freq="MS")
        t[:] = (months - months[0]).days.to_numpy()
        ds.createVariable("lat", "f8", ("lat",))[:] = -30.0 + np.arange(ny) * 2.0
        ds["lat"].units = "degrees_north"
        ds.createVariable("lon", "f8", ("lon",))[:] = -180.0 + np.arange(nx) * 9.0
        ds["lon"].units = "degrees_east"
        kw = {"zlib": True, "chunksizes": (4, 10, 10)} if layout == "chunked" else {"contiguous": True}
        v = ds.createVariable("sst", "f4", ("time", "lat", "lon"), fill_value=np.float32(-999.0), **kw)
        v.units = "degC"
        v[:] = np.ma.masked_invalid(values)
    return values


def test_contiguous_whole_rows_read_in_one_process(tmp_path, monkeypatch):
    p = tmp_path / "u.nc"
    values = _write(p, "contiguous")
    g = open_grid(p, "sst")  # default chunks: whole rows, whole series
    assert reader._cheap_reads(g)
    monkeypatch.setattr(reader, "_PARALLEL_BYTES", 0)  # large enough for a pool otherwise
    assert reader._workers(g, 10**9, 8) == 1
    flat = np.array([0, 41, 10 * 40 + 21, 29 * 40 + 39])
    iy, ix = np.divmod(flat, 40)
    # values against direct NumPy indexing of the array written (NaN where masked)
    assert_array_equal(reader.read_cells(g, flat), values[:, iy, ix].T)


def test_chunked_compressed_file_still_uses_processes(tmp_path, monkeypatch):
    p = tmp_path / "c.nc"
    values = _write(p, "chunked")
    g = open_grid(p, "sst")
    assert not reader._cheap_reads(g)
    monkeypatch.setattr(reader, "_PARALLEL_BYTES", 0)
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "2")
    assert reader._workers(g, 10**9, 8) == 2
    flat = np.array([5, 11 * 40 + 22, 25 * 40 + 3])
    iy, ix = np.divmod(flat, 40)
    assert_array_equal(reader.read_cells(g, flat), values[:, iy, ix].T)


def test_ranges_matches_a_python_loop():
    starts, counts = np.array([3, 0, 7, 2]), np.array([2, 0, 1, 3])
    # reference: the plain loop the helper replaces (common practice)
    expect = np.concatenate([np.arange(s, s + c) for s, c in zip(starts, counts, strict=True)])
    assert_array_equal(_ranges(starts, counts), expect)
    assert _ranges(np.array([4]), np.array([0])).size == 0


def test_reads_shared_between_this_process_and_kept_readers(tmp_path, monkeypatch):
    from envlink.core import processes

    p = tmp_path / "c.nc"
    values = _write(p, "chunked")
    g = open_grid(p, "sst")
    monkeypatch.setattr(reader, "_PARALLEL_BYTES", 0)
    monkeypatch.setattr(reader, "_TILE_BYTES", 2_000)  # one storage chunk per tile: many tiles
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "2")
    flat = np.sort(np.random.default_rng(3).choice(30 * 40, size=200, replace=False))
    iy, ix = np.divmod(flat, 40)
    with netCDF4.Dataset(p) as ds:  # reference: the raw netCDF4 read, fill values masked
        raw = ds["sst"][:].filled(np.nan)
    try:
        assert_array_equal(reader.read_cells(g, flat), raw[:, iy, ix].T)
        kept = processes._KEPT["pool"]
        assert_array_equal(reader.read_cells(g, flat[::-1]), raw[:, iy[::-1], ix[::-1]].T)
        assert processes._KEPT["pool"] is kept  # the second read reuses the readers
    finally:
        processes.close_reader_pool()
    assert "pool" not in processes._KEPT
    assert_array_equal(raw, np.where(np.isnan(values), np.nan, values))


def test_merged_candidates_are_one_copy(tmp_path):
    from envlink.extract.series import CellSeries

    p = tmp_path / "u.nc"
    values = _write(p, "contiguous")
    cs = CellSeries(open_grid(p, "sst"))
    base = np.array([3, 50, 700])
    more = np.array([5, 51, 900, 1100])
    cs.get(base)
    cs.get(np.array([51, 900]))  # some candidates already in memory, in a part of their own
    X, rows = cs.view_with(base, more)
    both = np.concatenate([base, more])
    iy, ix = np.divmod(both, 40)
    # reference: direct NumPy indexing of the array written
    assert_array_equal(X[rows], values[:, iy, ix].T)
    held = [part for part in cs._parts if part.X is not None]
    assert len(held) == 1 and held[0].X is X  # the merged copy replaced the parts it holds
