"""Missing data, valid ranges, packing and lon/lat order, against hand decodes of raw arrays.

Each expected array is decoded here by hand from the raw stored values following
CF Conventions v1.11 §2.5.1 (missing data: _FillValue, missing_value, valid_min,
valid_max, valid_range, tested on the packed values) and §8.1 (packed data:
unpacked = packed * scale_factor + add_offset).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from reference.cf_conventions import KELVIN_AT_ZERO_CELSIUS, cf_unpack

from envlink import open_grid
from envlink.grids import ValidRangeWarning
from envlink.grids.conventions import normalise_lonlat
from grids._writers import simple_grid

LAT = np.array([-10.0, 0.0, 10.0])
LON = np.array([-170.0, -60.0, 50.0, 160.0])
TIME = np.array([0.0, 31.0])  # days since 2000-01-01: January and February 2000


def _raw(seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.integers(-1000, 3000, size=(2, 3, 4)).astype("int16")


def _conventions(g: xr.DataArray) -> list[str]:
    return json.loads(g.attrs["envlink_conventions"])


def test_packed_int16_with_fill_and_valid_range(tmp_path):
    raw = _raw()
    raw[0, 0, 0] = -32768
    attrs = {
        "units": "degC",
        "scale_factor": 0.01,
        "add_offset": 20.0,
        "valid_range": np.array([-500, 2500], dtype="int16"),
    }
    p = simple_grid(tmp_path / "packed.nc", raw, lat=LAT, lon=LON, time=TIME,
                    attrs=attrs, fill_value=np.int16(-32768))
    g = open_grid(p)
    # Hand decode, CF §2.5.1 then §8.1: mask on packed values, then unpack in float64.
    valid = (raw != -32768) & (raw >= -500) & (raw <= 2500)
    expected = np.where(valid, cf_unpack(raw.astype(np.float64), 0.01, 20.0), np.nan)
    assert g.dtype == np.float64
    assert_allclose(g.values, expected, rtol=0.0, atol=1e-12)
    conv = _conventions(g)
    assert "_FillValue -32768 masked" in conv
    assert "valid_range [-500, 2500] applied on packed values" in conv
    assert "unpacked scale_factor=0.01 add_offset=20 in float64" in conv


def test_valid_min_and_valid_max_on_packed_values(tmp_path):
    raw = _raw(1)
    attrs = {"units": "degC", "scale_factor": 0.5, "add_offset": -3.0,
             "valid_min": np.int16(0), "valid_max": np.int16(2000)}
    p = simple_grid(tmp_path / "minmax.nc", raw, lat=LAT, lon=LON, time=TIME, attrs=attrs)
    g = open_grid(p)
    # CF §2.5.1: valid_min/valid_max are compared with the packed values.
    expected = np.where((raw >= 0) & (raw <= 2000), raw * 0.5 - 3.0, np.nan)
    assert_allclose(g.values, expected, rtol=0.0, atol=1e-12)


def test_valid_max_only_unpacked_float(tmp_path):
    raw = np.linspace(-5.0, 40.0, 24, dtype="float32").reshape(2, 3, 4)
    p = simple_grid(tmp_path / "vmax.nc", raw, lat=LAT, lon=LON, time=TIME,
                    attrs={"units": "degC", "valid_max": np.float32(35.0)})
    g = open_grid(p)
    assert g.dtype == np.float32  # nothing unpacked or converted: storage precision kept
    assert_array_equal(g.values, np.where(raw <= 35.0, raw, np.nan))
    assert "valid_max 35 applied on stored values" in _conventions(g)


def test_missing_value_vector_and_float_fill(tmp_path):
    raw = np.arange(24, dtype="float32").reshape(2, 3, 4)
    raw[0, 1, 1] = 1e20
    raw[1, 2, 3] = -999.0
    raw[1, 0, 0] = -888.0
    attrs = {"units": "degC", "missing_value": np.array([-999.0, -888.0], dtype="float32")}
    p = simple_grid(tmp_path / "mv.nc", raw, lat=LAT, lon=LON, time=TIME, attrs=attrs,
                    fill_value=np.float32(1e20))
    g = open_grid(p)
    # CF §2.5.1: _FillValue and every missing_value mark data as missing.
    expected = np.where(np.isin(raw, np.array([1e20, -999.0, -888.0], dtype="float32")), np.nan, raw)
    assert_array_equal(g.values, expected)


def test_valid_range_in_unpacked_units_warns_and_applies_unpacked(tmp_path):
    raw = np.array([[[0, 500, 1000, 1500]] * 3] * 2, dtype="int16")  # 273.15 .. 288.15 K
    attrs = {"units": "K", "scale_factor": 0.01, "add_offset": 273.15,
             "valid_range": np.array([270.0, 285.0], dtype="float64")}
    p = simple_grid(tmp_path / "vr_unpacked.nc", raw, lat=LAT, lon=LON, time=TIME, attrs=attrs)
    with pytest.warns(ValidRangeWarning, match="looks stated in unpacked units"):
        g = open_grid(p)
    unpacked = cf_unpack(raw.astype(np.float64), 0.01, 273.15)
    expected = np.where((unpacked >= 270.0) & (unpacked <= 285.0), unpacked, np.nan) - KELVIN_AT_ZERO_CELSIUS
    assert_allclose(g.values, expected, rtol=0.0, atol=1e-9)


def test_longitudes_0_360_shifted_and_latitudes_flipped(tmp_path):
    lon360 = np.array([0.0, 90.0, 180.0, 270.0])
    lat_desc = np.array([10.0, 0.0, -10.0])
    raw = np.arange(24, dtype="float64").reshape(2, 3, 4)
    p = simple_grid(tmp_path / "shift.nc", raw, lat=lat_desc, lon=lon360, time=TIME)
    g = open_grid(p)
    assert_array_equal(g.lon.values, [-180.0, -90.0, 0.0, 90.0])
    assert_array_equal(g.lat.values, [-10.0, 0.0, 10.0])
    # By hand: lon 180 -> -180 and 270 -> -90 move to the front; rows reversed.
    expected = raw[:, ::-1, :][:, :, [2, 3, 0, 1]]
    assert_array_equal(g.values, expected)
    assert g.attrs["envlink_global"] is True
    conv = _conventions(g)
    assert "lon 0..270 shifted to -180..180" in conv and "lat flipped to ascending" in conv


def test_duplicate_seam_column_dropped(tmp_path):
    lon = np.arange(0.0, 361.0, 90.0)  # 0 and 360 are the same meridian
    raw = np.arange(2 * 3 * 5, dtype="float64").reshape(2, 3, 5)
    p = simple_grid(tmp_path / "seam.nc", raw, lat=LAT, lon=lon, time=TIME)
    g = open_grid(p)
    assert_array_equal(g.lon.values, [-180.0, -90.0, 0.0, 90.0])
    assert_array_equal(g.values[:, :, 2], raw[:, :, 0])
    assert any("duplicate longitude" in c for c in _conventions(g))


@pytest.mark.requires_dask
def test_normalisation_stays_lazy(tmp_path):
    import dask.array as dsa

    raw = _raw(2)
    p = simple_grid(tmp_path / "lazy.nc", raw, lat=LAT[::-1], lon=np.array([0.0, 90.0, 180.0, 270.0]),
                    time=TIME, attrs={"units": "K", "scale_factor": 0.01, "add_offset": 273.15},
                    fill_value=np.int16(-32768))
    g = open_grid(p)
    assert isinstance(g.data, dsa.Array)  # nothing computed yet
    expected = (raw[:, ::-1, :][:, :, [2, 3, 0, 1]] * 0.01 + 273.15) - KELVIN_AT_ZERO_CELSIUS
    assert_allclose(g.values, expected, rtol=0.0, atol=1e-9)


def test_without_dask_gives_numpy(tmp_path):
    raw = _raw(3)
    p = simple_grid(tmp_path / "eager.nc", raw, lat=LAT, lon=LON, time=TIME, attrs={"units": "degC"})
    g = open_grid(p, chunks=None)
    assert isinstance(g.data, np.ndarray)
    assert_array_equal(g.values, raw.astype(np.float64))


def test_unsigned_bytes(tmp_path):
    # netCDF-3 bytes flagged "_Unsigned" (NUG / CF §2.2 note): -1 means 255.
    raw = np.array([0, 10, -56, -1] * 6, dtype="int8").reshape(2, 3, 4)
    attrs = {"units": "degC", "_Unsigned": "true", "scale_factor": 0.2, "add_offset": -5.0}
    p = simple_grid(tmp_path / "u8.nc", raw, lat=LAT, lon=LON, time=TIME, attrs=attrs,
                    fill_value=np.int8(-1))
    g = open_grid(p)
    as_unsigned = raw.view("uint8").astype(np.float64)
    expected = np.where(as_unsigned == 255, np.nan, as_unsigned * 0.2 - 5.0)
    assert_allclose(g.values, expected, rtol=0.0, atol=1e-12)
    assert "_Unsigned: stored signed integers read as uint8" in _conventions(g)


@settings(max_examples=60, deadline=None)
@given(
    start=st.floats(min_value=-540.0, max_value=540.0, allow_nan=False),
    step=st.sampled_from([0.25, 0.5, 1.0, 2.5, 5.0, 30.0]),
    n=st.integers(min_value=1, max_value=40),
    descending=st.booleans(),
)
def test_lonlat_normalisation_property(start, step, n, descending):
    # Property (common practice): wrapping is a permutation of columns that keeps every
    # value with its own longitude, and the result is ascending in [-180, 180).
    n = min(n, int(360 / step))
    lon = start + step * np.arange(n)
    lat = np.array([5.0, 0.0, -5.0]) if descending else np.array([-5.0, 0.0, 5.0])
    values = np.arange(3 * n, dtype=float).reshape(3, n)
    da = xr.DataArray(values, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    out, _ = normalise_lonlat(da)
    got_lon = out.lon.values
    assert np.all(np.diff(got_lon) > 0) and got_lon.min() >= -180.0 and got_lon.max() < 180.0
    assert np.all(np.diff(out.lat.values) > 0)
    for j, x in enumerate(got_lon):
        src = int(np.argmin(np.abs(((lon - x + 180.0) % 360.0) - 180.0)))
        row = values[::-1, src] if descending else values[:, src]
        assert_array_equal(out.values[:, j], row)
