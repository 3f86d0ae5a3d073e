"""The attach output contract, parameter errors, caching and lazy (file / dask) grids."""

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
    for key in ("grid_identity", "variable", "stat", "window", "spatial", "baseline", "time_weights", "software"):
        assert key in prov
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
        ({"spatial": "buffer:-5km"}, r"'buffer:Dkm' with D a positive distance in km; got 'buffer:-5km'"),
        ({"spatial": "nearest-valid"}, r"'nearest-valid:Dkm'"),
        ({"baseline": "1990"}, r"The 'baseline' parameter of attach must be two years 'YYYY-YYYY'"),
        ({"time_weights": "days"}, r"The 'time_weights' parameter of attach must be 'duration' or 'equal'; got 'days'"),
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


def test_cache_round_trip(grid, tmp_path):
    t = _rows()
    first = attach(t, grid, name="v", cache_dir=tmp_path)
    assert first.attrs["envlink"]["v"]["cache"] == "stored"
    assert len(list(tmp_path.glob("*.npz"))) == 1
    again = attach(t, grid, name="w", cache_dir=tmp_path)
    assert again.attrs["envlink"]["w"]["cache"] == "hit"
    assert_allclose(again["w"], first["v"], rtol=0, atol=0, equal_nan=True)
    assert again["w_flags"].tolist() == first["v_flags"].tolist()
    # another request, or other rows, or other values in the grid: another entry
    attach(t, grid, name="v", stat="max", cache_dir=tmp_path)
    t2 = t.copy()
    t2.loc[0, "period_end"] = "2000-05-31"
    attach(t2, grid, name="v", cache_dir=tmp_path)
    attach(t, grid + 1.0, name="v", cache_dir=tmp_path)
    assert len(list(tmp_path.glob("*.npz"))) == 4


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


def test_cache_that_cannot_be_written_warns_and_the_run_goes_on(grid, tmp_path):
    from envlink.extract.cache import CacheWarning

    blocker = tmp_path / "not_a_folder"
    blocker.write_text("a regular file\n")  # no folder can be made under it, even as root
    t = _rows()
    with pytest.warns(CacheWarning, match=r"cache at '.*not_a_folder.*' could not be written .*not cached"):
        out = attach(t, grid, name="v", cache_dir=blocker / "cache")
    assert_allclose(out["v"], attach(t, grid, name="v")["v"], rtol=0, atol=0, equal_nan=True)


def test_cache_write_refused_warns(grid, tmp_path, monkeypatch):
    import errno

    import envlink.extract.cache as cache

    def refuse(path):
        raise PermissionError(errno.EACCES, "Permission denied", str(path) + ".x.part")

    monkeypatch.setattr(cache, "atomic_path", refuse)
    with pytest.warns(cache.CacheWarning, match=r"could not be written \(Permission denied\)") as rec:
        assert cache.save(tmp_path, "0" * 64, {k: np.zeros(2) for k in cache._FIELDS}) is None
    assert ".part" not in str(rec[0].message)  # the temporary name is no use to the user


@pytest.mark.parametrize("damage", ["garbage", "truncated", "short"])
def test_damaged_cache_entry_is_a_miss_with_a_warning(grid, tmp_path, damage):
    from envlink.extract.cache import CacheWarning

    t = _rows()
    first = attach(t, grid, name="v", cache_dir=tmp_path)
    (entry,) = tmp_path.glob("*.npz")
    raw = entry.read_bytes()
    if damage == "garbage":
        entry.write_bytes(b"not an npz file at all")
    elif damage == "truncated":
        entry.write_bytes(raw[: len(raw) // 2])  # zip header kept, directory lost
    else:
        np.savez(entry, **{k: np.zeros(2) for k in ("value", "cell_lat", "cell_lon", "distance_km",
                                                       "coverage", "flags")})
    with pytest.warns(CacheWarning, match=r"cache entry .*\.npz' could not be read .*computed again"):
        again = attach(t, grid, name="w", cache_dir=tmp_path)
    assert again.attrs["envlink"]["w"]["cache"] == "stored"
    assert_allclose(again["w"], first["v"], rtol=0, atol=0, equal_nan=True)
    assert again["w_flags"].tolist() == first["v_flags"].tolist()
    third = attach(t, grid, name="u", cache_dir=tmp_path)  # the entry was written again
    assert third.attrs["envlink"]["u"]["cache"] == "hit"


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


def test_cache_key_changes_with_the_extraction_code(grid, tmp_path, monkeypatch):
    # results cached by other extraction code are not served: the key holds a hash
    # of the code's source (SHA-256 over envlink/extract/*.py and envlink/geo.py)
    import hashlib
    from pathlib import Path

    from envlink.extract import cache

    src = Path(cache.__file__).resolve().parent
    files = sorted(src.glob("*.py")) + [src.parent / "geo.py"]
    h = hashlib.sha256()
    for f in files:  # the same recipe, recomputed here from the files on disk
        h.update(f"{f.parent.name}/{f.name}\x00".encode() + f.read_bytes() + b"\x00")
    assert cache.code_hash() == h.hexdigest()
    t = _rows()
    key = cache.request_key(grid, t, {"stat": "mean"})
    assert attach(t, grid, name="v", cache_dir=tmp_path).attrs["envlink"]["v"]["cache"] == "stored"
    monkeypatch.setattr(cache, "_CODE_HASH", "0" * 64)
    assert cache.request_key(grid, t, {"stat": "mean"}) != key
    assert attach(t, grid, name="v", cache_dir=tmp_path).attrs["envlink"]["v"]["cache"] == "stored"
    assert len(list(tmp_path.glob("*.npz"))) == 2
