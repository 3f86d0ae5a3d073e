"""open_grid's default dask chunks follow the file's storage (whole series per task)."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from envlink.grids import open as gopen
from envlink.grids.open import open_grid


def _write(path, layout: str, shape=(24, 40, 60)) -> np.ndarray:
    nt, ny, nx = shape
    values = np.random.default_rng(3).normal(20.0, 1.0, shape).astype(np.float32)
    values[:, :5, :7] = np.nan  # masked cells come back as NaN
    with netCDF4.Dataset(path, "w") as ds:
        for d, n in zip(("time", "lat", "lon"), shape, strict=True):
            ds.createDimension(d, n)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.calendar = "days since 2000-01-01", "standard"
        months = pd.date_range("2000-01-01", periods=nt, freq="MS")
        t[:] = (months - months[0]).days.to_numpy()  # monthly stamps (cells inferred)
        ds.createVariable("lat", "f8", ("lat",))[:] = -60.0 + np.arange(ny) * 3.0
        ds["lat"].units = "degrees_north"
        ds.createVariable("lon", "f8", ("lon",))[:] = -180.0 + np.arange(nx) * 6.0
        ds["lon"].units = "degrees_east"
        kw = {"zlib": True, "complevel": 1, "chunksizes": (6, 10, 20)} if layout == "chunked" else {"contiguous": True}
        v = ds.createVariable("sst", "f4", ("time", "lat", "lon"), fill_value=np.float32(-999.0), **kw)
        v.units = "degC"
        v[:] = np.ma.masked_invalid(values)
    return values


def test_chunked_file_gets_file_chunks_in_space_and_whole_time(tmp_path):
    p = tmp_path / "c.nc"
    values = _write(p, "chunked")
    g = open_grid(p, "sst")
    # file chunks (6, 10, 20): dask chunks are whole along time, file-aligned in space
    assert g.chunks == ((24,), (10,) * 4, (20,) * 3)
    # the same values as the eager read (netCDF4 itself: an independent reader)
    assert_array_equal(g.values, open_grid(p, "sst", chunks=None).values)
    assert_array_equal(g.values, values)


def test_contiguous_file_gets_whole_rows_and_whole_time(tmp_path, monkeypatch):
    p = tmp_path / "u.nc"
    values = _write(p, "contiguous")
    monkeypatch.setattr(gopen, "_CHUNK_BYTES_CONTIGUOUS", 24 * 60 * 4 * 8)  # 8 rows of whole series
    g = open_grid(p, "sst")
    assert g.chunks == ((24,), (8,) * 5, (60,))
    assert_array_equal(g.values, values)


def test_long_time_axis_capped_at_a_multiple_of_the_file_time_chunk(tmp_path, monkeypatch):
    p = tmp_path / "c.nc"
    _write(p, "chunked")
    monkeypatch.setattr(gopen, "_CHUNK_BYTES_MAX", 13 * 10 * 20 * 4)  # room for 13 steps: 12 = 2 file chunks
    g = open_grid(p, "sst")
    assert g.chunks[0] == (12, 12)


@pytest.mark.parametrize("chunks", [None, {"time": 6, "lat": 40, "lon": 60}])
def test_explicit_chunks_are_kept(tmp_path, chunks):
    p = tmp_path / "c.nc"
    _write(p, "chunked")
    g = open_grid(p, "sst", chunks=chunks)
    assert g.chunks == (None if chunks is None else ((6,) * 4, (40,), (60,)))
