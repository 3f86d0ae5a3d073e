"""Many-file archives: values equal to raw netCDF4 indexing of each file, faults reported as documented.

Expected values are the stored integers read with the netCDF4 library (no scaling),
decoded by hand with the CF rules: CF Conventions v1.11 §8.1 (unpacked = packed *
scale_factor + add_offset, in the unpacked type float64 here because the scale is
applied as a double), §2.5.1 (``_FillValue`` and ``valid_min`` / ``valid_max``
tested on the packed values). The faults and what is said about each are those of
docs/archives.md.
"""

from __future__ import annotations

import json
import os
import warnings

import netCDF4
import numpy as np
import pytest
from numpy.testing import assert_array_equal

from envlink import GridError, open_grid
from envlink.errors import GridWarning
from envlink.extract import reader
from envlink.grids import archive_read
from envlink.grids.info import grid_info
from grids._writers import write_nc

# descending latitudes and 0..360 longitudes: the normalised grid flips and rolls them
LAT = np.array([30.0, 10.0, -10.0, -30.0], dtype=np.float32)
LON = np.array([0.0, 60.0, 120.0, 180.0, 240.0, 300.0], dtype=np.float32)
FILL = np.int16(-32767)
ATTRS = {"units": "degC", "scale_factor": np.float32(0.01), "add_offset": np.float32(5.0),
         "valid_min": np.int16(-2000), "valid_max": np.int16(3000)}


def _packed(day: int, steps: int = 1, ny: int = LAT.size) -> np.ndarray:
    rng = np.random.default_rng(day)
    v = rng.integers(-2500, 3500, size=(steps, 1, ny, LON.size)).astype(np.int16)
    v[:, :, 0, 0] = FILL  # a masked cell
    return v


def daily(folder, days, *, name="d{:03d}.nc", steps=1, lat=LAT, lon=LON, attrs=None, chunks=None,
          stamp_hour=12.0, units="days since 2000-01-01"):
    """One file per day (or per ``steps`` days): (time, zlev, lat, lon) int16 packed."""
    paths = []
    for d in days:
        t = d * steps + np.arange(steps) + stamp_hour / 24.0
        p = write_nc(folder / name.format(d), _packed(d, steps, len(lat)), dims=("time", "zlev", "lat", "lon"),
                     coords={"time": t, "zlev": np.array([0.0]), "lat": lat, "lon": lon},
                     coord_attrs={"time": {"units": units, "calendar": "standard"},
                                  "lat": {"units": "degrees_north"}, "lon": {"units": "degrees_east"}},
                     attrs={**ATTRS, **(attrs or {})}, fill_value=FILL, chunks=chunks)
        paths.append(p)
    return paths


def cf_decode(path) -> np.ndarray:
    """CF §8.1 / §2.5.1 by hand on the stored integers, then lat ascending and lon in [-180, 180)."""
    with netCDF4.Dataset(path) as nc:
        v = nc["sst"]
        v.set_auto_maskandscale(False)
        raw = np.asarray(v[:, 0])
        s, o = float(v.scale_factor), float(v.add_offset)
        bad = (raw == v._FillValue) | (raw < v.valid_min) | (raw > v.valid_max)
        lat, lon = np.asarray(nc["lat"][:]), np.asarray(nc["lon"][:])
    out = np.where(bad, np.nan, raw.astype(np.float64) * s + o)
    wrapped = (lon.astype(np.float64) + 180.0) % 360.0 - 180.0
    return out[:, np.argsort(lat)][:, :, np.argsort(wrapped)]


def test_values_bit_for_bit_with_raw_netcdf4_and_single_files(tmp_path):
    paths = daily(tmp_path, range(6))
    g = open_grid(paths)
    truth = np.concatenate([cf_decode(p) for p in paths])
    assert g.dims == ("time", "lat", "lon") and g.dtype == np.float64
    assert_array_equal(g.values, truth)  # CF §8.1 / §2.5.1, bit for bit (NaN where masked)
    assert_array_equal(g.isel(time=[4, 1], lon=slice(1, 4)).values, truth[[4, 1]][:, :, 1:4])
    for k, p in enumerate(paths):  # the single-file path gives the same floats
        assert_array_equal(open_grid(p).values[0], g.values[k])
    flat = np.array([0, 5, 7, 23, 12])  # iy * nx + ix
    got = reader.read_cells(g, flat)
    assert reader.cell_reader(g) is not None
    assert_array_equal(got, truth.reshape(6, -1)[:, flat].T)
    assert str(g.time_start.values[0])[:10] == "2000-01-01" and str(g.time_end.values[-1])[:10] == "2000-01-07"


def test_multi_step_chunked_files_and_worker_processes(tmp_path, monkeypatch):
    paths = daily(tmp_path, range(9), steps=3, chunks=(2, 1, 2, 4))
    g = open_grid(paths)
    truth = np.concatenate([cf_decode(p) for p in paths])
    flat = np.array([1, 2, 9, 14, 22, 23])
    assert_array_equal(reader.read_cells(g, flat), truth.reshape(27, -1)[:, flat].T)
    monkeypatch.setattr(archive_read, "_PARALLEL_BYTES", 0)  # read in 2 worker processes
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "2")
    calls = []
    g2 = open_grid(paths)
    series = g2.variable._data.array.envlink_read_cells(*np.divmod(flat, 6), progress=calls.append)[0]
    assert_array_equal(series, truth.reshape(27, -1)[:, flat].T)
    assert sum(calls) == flat.size


def test_halo_gathers_valid_neighbours_of_masked_cells(tmp_path):
    paths = daily(tmp_path, range(3))
    g = open_grid(paths)
    truth = np.concatenate([cf_decode(p) for p in paths])
    masked = 3 * 6 + 3  # the stored (0, 0) cell: lat 30 -> row 3, lon 0 -> column 3
    assert np.isnan(truth[:, 3, 3]).all()
    any_valid = np.full((4, 6), -1, dtype=np.int8)
    series, extra, extra_series = reader.read_cells_near_gaps(g, np.array([masked]), any_valid=any_valid,
                                                              halo=(1, 1))
    near = [2 * 6 + 2, 2 * 6 + 3, 2 * 6 + 4, 3 * 6 + 2, 3 * 6 + 4]  # rows 2-3, columns 2-4
    with_data = [c for c in near if np.isfinite(truth[0].ravel()[c])]  # at the first step
    assert np.isnan(series).all() and len(with_data) >= 2 and sorted(extra.tolist()) == with_data
    assert_array_equal(extra_series, truth.reshape(3, -1)[:, extra].T)
    assert any_valid[3, 3] == 0 and any_valid[2, 2] == 1


def test_gap_warns_and_is_listed(tmp_path):
    paths = daily(tmp_path, [0, 1, 2, 4, 5])  # day 3 missing
    with pytest.warns(GridWarning, match=r"1 gap\(s\) in time: the first from 2000-01-04.* to 2000-01-05.*"
                                         r"between d002\.nc and d004\.nc"):
        g = open_grid(paths)
    assert "1 gap(s) in time between files (listed by 'envlink grid')" in json.loads(g.attrs["envlink_conventions"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GridWarning)
        info = grid_info(paths)
    assert info.time["n_gaps"] == 1 and info.time["gaps"][0]["missing_steps"] == 1
    assert "Archive: 5 files" in str(info) and "d000.nc .. d005.nc" in str(info)


def test_duplicate_day_names_both_files(tmp_path):
    daily(tmp_path, [0, 1, 2])
    dup = daily(tmp_path, [1], name="copy_of_{:03d}.nc")[0]
    with pytest.raises(GridError, match=r"'.*copy_of_001\.nc' and '.*d001\.nc' both hold the time stamp 1\.5 "):
        open_grid(sorted(tmp_path.glob("*.nc")))
    os.remove(dup)
    daily(tmp_path, range(3, 8))
    # the same day stamped at midnight in one file, at noon in the other: one time cell
    daily(tmp_path, [1], name="midnight_{:03d}.nc", stamp_hour=0.0)
    with pytest.raises(GridError, match=r"files put steps in one time cell \('.*midnight_001\.nc' and '.*d001\.nc'\)"):
        open_grid(sorted(tmp_path.glob("*.nc")))


def test_unsorted_names_are_sorted_by_time_with_a_note(tmp_path):
    paths = daily(tmp_path, [2, 0, 1], name="f{:03d}.nc")
    named = [tmp_path / "b.nc", tmp_path / "c.nc", tmp_path / "a.nc"]  # day 2, 0, 1
    for p, q in zip(paths, named, strict=True):
        p.rename(q)
    g = open_grid(str(tmp_path / "*.nc"))
    notes = json.loads(g.attrs["envlink_conventions"])
    assert "files sorted by time: their names are not in time order (c.nc comes before a.nc in time)" in notes
    truth = np.concatenate([cf_decode(tmp_path / n) for n in ("c.nc", "a.nc", "b.nc")])
    assert_array_equal(g.values, truth)
    files = [f["path"] for f in json.loads(g.attrs["envlink_identity"])["files"]]
    assert [os.path.basename(f) for f in files] == ["c.nc", "a.nc", "b.nc"]


@pytest.mark.parametrize(("change", "says"), [
    ({"lon": LON + np.float32(0.5)}, r"d002\.nc' has other lon values \(another grid\): value 0 is 0\.5"),
    ({"lat": LAT[:3]}, r"d002\.nc' has 3 values along 'lat', the first file 4"),
    ({"attrs": {"scale_factor": np.float32(0.02)}}, r"d002\.nc' has scale_factor 0\.0199.* where the first file"),
    ({"attrs": {"units": "K"}}, r"d002\.nc' has units 'K' where the first file has 'degC'"),
])
def test_file_on_another_grid_is_named(tmp_path, change, says):
    daily(tmp_path, [0, 1])
    daily(tmp_path, [2], **change)
    with pytest.raises(GridError, match=says):
        open_grid(sorted(tmp_path.glob("*.nc")))


def test_truncated_file_at_open_and_corrupt_file_at_read(tmp_path):
    import sys

    sys.path.insert(0, str(os.path.join(os.path.dirname(__file__), "..", "benchmarks")))
    from bench_archive import write_day  # zlib-compressed daily files

    paths = [write_day(tmp_path / f"s{d}.nc", d, 90, 180) for d in range(4)]
    size = paths[2].stat().st_size
    with open(paths[2], "r+b") as fh:
        fh.truncate(size - 500)
    with pytest.raises(GridError, match=r"s2\.nc' is truncated"):
        open_grid(paths)
    write_day(paths[2], 2, 90, 180)
    g = open_grid(paths)
    with open(paths[1], "r+b") as fh:  # scramble compressed values in place (mid-file): same size
        n = paths[1].stat().st_size
        fh.seek(n // 2)
        fh.write(bytes(range(256)) + bytes(144))
    st = paths[1].stat()
    os.utime(paths[1], ns=(st.st_atime_ns, g.variable._data.array.spec.stamps[1][1]))
    with pytest.raises(GridError, match=r"Cannot read the grid file '.*s1\.nc'"):
        reader.read_cells(g, np.array([100, 200]))


def test_identity_covers_every_file(tmp_path):
    paths = daily(tmp_path, range(4))
    key = json.loads(open_grid(paths).attrs["envlink_identity"])["key"]
    assert json.loads(open_grid(paths).attrs["envlink_identity"])["key"] == key
    g = open_grid(paths)
    daily(tmp_path, [2], attrs={"long_name": "rewritten"})  # same name, new content
    st = paths[2].stat()
    os.utime(paths[2], ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    new = json.loads(open_grid(paths).attrs["envlink_identity"])
    assert new["key"] != key and len(new["files"]) == 4
    with pytest.raises(GridError, match=r"d002\.nc' changed since the archive was opened"):
        reader.read_cells(g, np.array([1]))


def test_envlink_grid_on_an_archive(tmp_path, capsys):
    from envlink.cli import main

    daily(tmp_path, range(5))
    assert main(["grid", str(tmp_path / "*.nc")]) == 0
    text = capsys.readouterr().out
    assert "Archive: 5 files (d000.nc .. d004.nc)" in text
    assert "read file by file" in text and "gaps: none" in text
    assert "storage is chunked by time" not in text  # one step per file is no time chunking
    assert "2000-01-01T00:00:00 .. 2000-01-06T00:00:00" in text


def test_per_file_time_units_and_monthly_files(tmp_path):
    # each file counts hours from its own day (CF §4.4 allows any reference date)
    paths = []
    for d in range(4):
        paths += daily(tmp_path, [d], units=f"hours since 2000-01-{d + 1:02d}", stamp_hour=-24.0 * d + 0.5)
    g = open_grid(paths)
    assert [str(t)[:10] for t in g.time_start.values] == ["2000-01-01", "2000-01-02", "2000-01-03", "2000-01-04"]
    # one length-1 file per month: the whole axis gives calendar-month cells (grids.md, "Time cells")
    monthly = []
    for m in range(6):
        monthly += daily(tmp_path, [m], name="m{:02d}.nc", units=f"days since 2000-{m + 1:02d}-15",
                         stamp_hour=-24.0 * m)  # value 0: the 15th of each month
    gm = open_grid(monthly)
    assert [str(t)[:10] for t in gm.time_end.values] == [f"2000-{m:02d}-01" for m in range(2, 8)]
    assert "time cells inferred: monthly step, each stamp taken as its calendar month" in gm.attrs[
        "envlink_conventions"]


def test_amounts_per_step_decoded_as_single_files(tmp_path):
    attrs = {"units": "kg m-2", "long_name": "precipitation amount"}  # per step -> mm/day
    paths = daily(tmp_path, range(3), attrs=attrs)
    g = open_grid(paths)
    assert g.attrs["units"] == "mm/day"
    for k, p in enumerate(paths):
        assert_array_equal(open_grid(p).values[0], g.values[k])
    assert_array_equal(reader.read_cells(g, np.array([7, 8])), g.values.reshape(3, -1)[:, [7, 8]].T)


def test_checkers_start_before_the_first_file_is_decoded_only_when_the_check_is_shared(monkeypatch):
    # the readers' start-up overlaps the first file's decoding (a fresh interpreter each)
    from envlink.core import processes
    from envlink.grids import archive_check

    started: list[int] = []
    monkeypatch.setattr(processes, "warm_up", started.append)
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "3")
    archive_check.start_checkers(archive_check._PARALLEL_FILES)
    archive_check.start_checkers(archive_check._PARALLEL_FILES - 1)  # checked in this process
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "1")
    archive_check.start_checkers(1000)
    assert started == [2]


def _empty_copy(src, dst):
    """``src`` with its time axis cut to length 0 (stored values, attributes and grid kept)."""
    import xarray as xr

    with xr.open_dataset(src, decode_cf=False) as ds:
        ds.isel(time=slice(0, 0)).load().to_netcdf(dst, unlimited_dims=["time"])
    return dst


def test_a_file_with_no_time_step_is_named_as_a_faulty_file(tmp_path, capsys):
    # checked against docs/archives.md: a faulty file of an archive (a truncated one, one on
    # another grid) is a GridError naming it, as a single file with an empty time axis is
    from envlink.cli import main

    paths = daily(tmp_path, [0, 1, 3, 4], name="sst_2010060{}.nc")
    empty = _empty_copy(paths[1], tmp_path / "sst_20100602.nc")
    with pytest.raises(GridError, match=rf"The file '{empty}' has no time steps \(its time axis has length 0\)"):
        open_grid(sorted(tmp_path.glob("*.nc")))
    assert main(["grid", str(tmp_path / "*.nc")]) == 2
    err = capsys.readouterr().err
    assert "sst_20100602.nc' has no time steps" in err and "not in time order" not in err
    # the empty file listed first (its metadata read in full) is named the same way
    first = _empty_copy(paths[0], tmp_path / "sst_20100531.nc")
    with pytest.raises(GridError, match=r"sst_20100531\.nc.* has no steps|sst_20100531\.nc' has no time steps"):
        open_grid([first, *paths])
