"""The attach output contract, parameter errors, lazy (file / dask) grids and the store's code key (the store: test_store.py)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_allclose

import envlink
from envlink.errors import InputError
from envlink.extract.attach import attach
from envlink.testing import make_grid

from ._grids import table


@pytest.fixture(scope="module")
def grid():
    return make_grid(lat=np.arange(-4.5, 5.0), lon=np.arange(-4.5, 5.0), periods=24, seed=31)


def _rows():
    t = table([0.2, 30.0, 1.1, np.nan, -2.2], [0.3, 0.0, 1.9, 0.0, -3.3],
              ["2000-02-01", "2000-02-01", "2001-05-01", "2000-01-01", ""],
              ["2000-04-30", "2000-02-29", "2001-06-30", "2000-01-31", ""])
    t.insert(0, "study", ["a", "b", "c", "d", "e"])
    t["effect"] = [0.1, 0.2, 0.3, 0.4, 0.5]
    t.loc[3, "locate_status"] = "rejected"
    return t


def test_every_row_in_order_input_unchanged_new_columns(grid):
    t = _rows()
    before = t.copy()
    out = envlink.attach(t, grid, name="sst")
    pd.testing.assert_frame_equal(t, before)  # input not modified
    pd.testing.assert_frame_equal(out[list(t.columns)], before)  # every input column unchanged, rows in order
    assert list(out.columns[len(t.columns):]) == [
        "sst", "sst_flags", "sst_cell_lat", "sst_cell_lon", "sst_distance_km", "sst_coverage"
    ]
    assert out["sst"].dtype == np.float64
    assert out["sst_flags"].tolist() == ["", "outside_grid", "", "site_rejected", "no_period"]
    # a row without a value always says why
    assert all(f for v, f in zip(out["sst"], out["sst_flags"], strict=True) if np.isnan(v))
    prov = out.attrs["envlink"]["sst"]
    for key in ("grid_identity", "variable", "stat", "window", "spatial", "time_weights", "software"):
        assert key in prov
    assert "baseline" not in prov  # recorded only for statistics that read one
    assert prov["stat"] == "mean" and prov["spatial"] == "nearest" and prov["window"] == "period"
    # a second covariate keeps the first one's provenance
    out2 = attach(out, grid, name="sst_lag", window="lag:1M")
    assert set(out2.attrs["envlink"]) == {"sst", "sst_lag"}


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"stat": "meen"}, r"The 'stat' parameter of attach must be one of .*; got 'meen'\. Did you mean 'mean'\?"),
        ({"stat": "quantile:1.5"}, r"'quantile:Q' with Q a number from 0 to 1; got 'quantile:1.5'"),
        ({"stat": "above"}, r"'above:T' with T a threshold"),
        ({"window": "lag:3W"}, r"The 'window' parameter of attach must be .*; got 'lag:3W'"),
        ({"window": "lagg:3M"}, r"Did you mean 'lag'\?"),
        ({"spatial": "buffer:-5km"}, r"'buffer:Rkm' with R a positive distance in km; got 'buffer:-5km'"),
        ({"spatial": "nearest-valid"}, r"'nearest-valid:Dkm'"),
        ({"baseline": "1990"}, r"The 'baseline' parameter of attach must be two years 'YYYY-YYYY'"),
        ({"time_weights": "days"}, r"The 'time_weights' parameter of attach must be one of 'duration', 'equal'; got 'days'"),
        ({"min_coverage": 2}, r"The 'min_coverage' parameter of attach must be a fraction from 0 to 1; got 2"),
        ({"mmm": 28.0}, r"The 'mmm' parameter of attach must be given only with stat='dhw-max'"),
        ({"stat": "dhw-max", "mmm": float("nan")}, r"The 'mmm' parameter of attach must be a finite number in degC .*; got nan"),
        ({"stat": "dhw-max", "mmm": float("inf")}, r"The 'mmm' parameter of attach must be a finite number .*; got inf"),
        ({"stat": "dhw-max", "mmm": True}, r"The 'mmm' parameter of attach must be a finite number .*; got True"),
        ({"threshold": 3.0}, r"The 'threshold' parameter of attach must be given only with stat 'above' or 'degree-days'; got 3"),
        ({"stat": "above:3", "threshold": 5.0}, r"The 'threshold' parameter of attach must be left out, or equal to the T"),
        ({"stat": "anomaly", "baseline": "1950-1960"}, r"The baseline 1950-1960 holds no time step"),
    ],
)
def test_parameter_errors(grid, kwargs, match):
    with pytest.raises(InputError, match=match):
        attach(_rows(), grid, name="v", **kwargs)


def test_missing_columns_and_name_clash(grid):
    with pytest.raises(InputError, match=r"The table \(run envlink.locate first\) has no column 'site_lat'"):
        attach(pd.DataFrame({"lat": [1.0]}), grid, name="v")
    t = _rows()
    t["v_flags"] = ""
    with pytest.raises(InputError, match=r"already has column 'v_flags'"):
        attach(t, grid, name="v")


def test_lazy_netcdf_and_dask_grids_match_memory(grid, tmp_path):
    path = tmp_path / "g.nc"
    ds = grid.to_dataset(name="sst")
    ds["sst"].attrs = {}
    ds.to_netcdf(path, encoding={"sst": {"zlib": True, "complevel": 1, "chunksizes": (6, 4, 4)}})
    lazy = xr.open_dataarray(path)
    lazy.attrs = dict(grid.attrs)
    assert lazy.encoding["chunksizes"] == (6, 4, 4)
    t = _rows()
    ref = attach(t, grid, name="v", spatial="nearest-valid:200km")
    got = attach(t, lazy, name="v", spatial="nearest-valid:200km")
    assert_allclose(got["v"], ref["v"], rtol=1e-12, equal_nan=True)
    pytest.importorskip("dask")
    dk = grid.chunk({"time": 5, "lat": 3, "lon": 4})
    got = attach(t, dk, name="v", stat="quantile:0.5", spatial="buffer:150km")
    ref = attach(t, grid, name="v", stat="quantile:0.5", spatial="buffer:150km")
    assert_allclose(got["v"], ref["v"], rtol=1e-12, equal_nan=True)


class _Recorder:
    """An array that records which slices are read (stands in for a chunked file)."""

    def __init__(self, arr):
        self.arr, self.shape, self.dtype, self.ndim = arr, arr.shape, arr.dtype, arr.ndim
        self.reads = []

    def __getitem__(self, idx):
        self.reads.append(idx)
        return self.arr[idx]


@pytest.mark.requires_dask
def test_dask_grid_reads_only_needed_chunks(grid):
    import dask.array as dska

    rec = _Recorder(grid.values)
    dk = grid.copy(data=dska.from_array(rec, chunks=(24, 2, 2), asarray=True, lock=False))
    rec.reads.clear()
    t = table([0.2, 0.4], [0.3, 0.1], "2000-02-01", "2000-04-30")
    out = attach(t, dk, name="v")
    assert_allclose(out["v"], attach(t, grid, name="v")["v"], rtol=1e-12)
    # the grid has 5 × 5 spatial chunks of 2 × 2 cells; both sites lie in the chunk of
    # rows 4-5, columns 4-5 (cells 5 and 4 / 5 and 4), and nothing else is read
    reads = [i for i in rec.reads if isinstance(i, tuple) and len(i) == 3]
    assert reads
    for _, ys, xs in reads:
        assert 4 <= ys.start and ys.stop <= 6 and 4 <= xs.start and xs.stop <= 6


def test_impossible_coordinates_are_site_rejected_without_numpy_warnings(grid):
    # |lat| > 90 or an infinite longitude are no coordinates (ISO 6709 ranges);
    # an empty table gives an empty result with the six columns.
    t = table([95.0, -91.0, 0.5, 0.5], [0.5, 0.5, np.inf, 360.5], "2000-01-01", "2000-01-31")
    t.index = ["x", "x", "y", "z"]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = envlink.attach(t, grid, name="v")
    assert out["v_flags"].tolist() == ["site_rejected"] * 3 + [""]
    assert list(out.index) == ["x", "x", "y", "z"]
    assert_allclose(out["v"].iloc[3], envlink.attach(table([0.5], [0.5], "2000-01-01", "2000-01-31"), grid, name="v")["v"][0], rtol=1e-12)
    empty = envlink.attach(t.iloc[:0], grid, name="v")
    assert len(empty) == 0 and "v_coverage" in empty.columns


def test_store_key_changes_with_the_decoding_code(grid, tmp_path, monkeypatch):
    # series stored by other decoding code are not served: the store's key holds a hash
    # of the code's source (SHA-256 over the import graphs of envlink.grids.open, the
    # cell reader and the store; tests/extract/test_codehash.py checks which files and
    # that an edit changes it)
    import hashlib
    from pathlib import Path

    from envlink.extract import store
    from envlink.extract.codehash import decoding_files

    root = Path(store.__file__).resolve().parents[2]
    h = hashlib.sha256()
    for f in decoding_files():  # the same recipe, recomputed here from the files on disk
        h.update(f"{f.relative_to(root).as_posix()}\x00".encode() + f.read_bytes() + b"\x00")
    assert store.decoding_code_hash() == h.hexdigest()
    path = tmp_path / "g.nc"
    ds = grid.to_dataset(name="sst")
    ds["sst"].attrs = {"units": "degC"}  # the fixture's boolean attribute has no netCDF type
    ds.to_netcdf(path)
    lazy = envlink.open_grid(path)
    t, cache = _rows(), str(tmp_path / "cache")
    key = store.grid_key(lazy)
    assert attach(t, lazy, name="v", cache_dir=cache).attrs["envlink"]["v"]["store"] == "stored"
    assert attach(t, lazy, name="v", cache_dir=cache).attrs["envlink"]["v"]["cells"] == "store"
    monkeypatch.setattr(store, "_CODE_HASH", "0" * 64)
    assert store.grid_key(lazy) != key
    again = attach(t, lazy, name="v", cache_dir=cache)
    assert again.attrs["envlink"]["v"]["cells"] == "read" and again.attrs["envlink"]["v"]["store"] == "stored"
    assert len([p for p in store.store_root(cache).iterdir() if p.is_dir()]) == 2
