"""Remote grids: a Zarr store and a chunked netCDF file served over HTTP from a loopback server.

The values must equal the local read of the same store or file, and a cell read must
fetch only the storage chunks the cells lie in: for Zarr, exactly the bytes of those
chunk files; for netCDF-4/HDF5 (uncompressed chunks), the chunks' bytes plus a little
HDF5 metadata (the chunk index), less than one more chunk. Chunk arithmetic: HDF5
File Format Specification v3 (a chunk is stored, and read, whole); Zarr storage
specification v2 (one object per chunk, keyed ``t.y.x``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_array_equal

from envlink import GridError, open_grid
from envlink.extract import reader
from envlink.grids.remote import is_url
from grids._http import serve
from grids._writers import simple_grid

pytestmark = pytest.mark.requires_remote

NT, NY, NX, C = 30, 32, 32, 8
LAT = -15.5 + np.arange(NY, dtype=np.float64)  # ascending, so stored and normalised indices agree
LON = -15.5 + np.arange(NX, dtype=np.float64)


def _data() -> np.ndarray:
    return np.random.default_rng(3).normal(20.0, 2.0, (NT, NY, NX)).astype(np.float32)


CELLS = np.array([1 * NX + 2, 3 * NX + 5, 20 * NX + 30])  # two in chunk (0, 0), one in chunk (2, 3)
TOUCHED = [(0, 0), (2, 3)]


def test_is_url():
    assert is_url("https://h/x.zarr") and is_url("s3://b/k.nc") and not is_url("file:///tmp/x.nc")
    assert not is_url("C:\\data\\x.nc") and not is_url("sst_*.nc")


@pytest.mark.requires_dask
def test_zarr_over_http_equals_local_and_fetches_only_needed_chunks(tmp_path):
    ds = xr.Dataset({"sst": (("time", "lat", "lon"), _data(), {"units": "degC"})},
                    coords={"time": ("time", np.arange(NT), {"units": "days since 2000-01-01"}),
                            "lat": LAT, "lon": LON})
    store = tmp_path / "sst.zarr"
    ds.to_zarr(store, zarr_format=2, consolidated=True, encoding={"sst": {"chunks": (NT, C, C)}})
    local = open_grid(store)
    with serve(tmp_path) as (base, counter):
        g = open_grid(f"{base}/sst.zarr")
        assert json.loads(g.attrs["envlink_identity"])["files"][0]["path"] == f"{base}/sst.zarr"
        counter["served"] = 0
        got = reader.read_cells(g, CELLS)
        fetched = counter["served"]
    assert_array_equal(got, reader.read_cells(local, CELLS))
    assert_array_equal(got, _data().reshape(NT, -1)[:, CELLS].T)
    # Zarr v2: one object per chunk "t.y.x"; only the two chunks holding a cell are fetched
    expected = sum((store / "sst" / f"0.{y}.{x}").stat().st_size for y, x in TOUCHED)
    assert fetched == expected


def test_netcdf_over_http_equals_local_and_fetches_only_needed_chunks(tmp_path):
    path = simple_grid(tmp_path / "sst.nc", _data(), lat=LAT, lon=LON, time=np.arange(NT, dtype=float),
                       chunks=(NT, C, C))
    local = open_grid(path)
    with serve(tmp_path) as (base, counter):
        g = open_grid(f"{base}/sst.nc")
        counter["served"] = 0
        got = reader.read_cells(g, CELLS)
        fetched = counter["served"]
        assert_array_equal(g.isel(time=[0, 7]).values, local.isel(time=[0, 7]).values)
    assert_array_equal(got, reader.read_cells(local, CELLS))
    chunk = NT * C * C * 4  # float32, uncompressed: each chunk is read whole
    assert len(TOUCHED) * chunk <= fetched < (len(TOUCHED) + 1) * chunk


def test_envlink_grid_on_a_url(tmp_path, capsys):
    from envlink.cli import main

    simple_grid(tmp_path / "sst.nc", _data(), lat=LAT, lon=LON, time=np.arange(NT, dtype=float), chunks=(NT, C, C))
    with serve(tmp_path) as (base, _):
        assert main(["grid", f"{base}/sst.nc"]) == 0
    text = capsys.readouterr().out
    assert f"Grid: {base}/sst.nc" in text and "* sst (time, lat, lon) float32" in text


def test_missing_remote_grid_is_a_grid_error(tmp_path):
    with serve(tmp_path) as (base, _):
        with pytest.raises(GridError, match=r"Cannot open the remote grid '.*/nothing\.nc'"):
            open_grid(f"{base}/nothing.nc")
