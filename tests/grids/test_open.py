"""open_grid on every kind of source: one file, many files, Zarr, curvilinear, in-memory, bad files.

Expected values are the raw arrays written by the test, decoded by hand with the CF
rules (CF Conventions v1.11 §8.1 packing, §2.5.1 missing data, §4.4 time).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from numpy.testing import assert_allclose, assert_array_equal
from reference.cf_conventions import KELVIN_AT_ZERO_CELSIUS, cf_unpack

from envlink import GridError, InputError, open_grid
from grids._writers import simple_grid, write_nc

LAT = np.array([-1.0, 0.0, 1.0])
LON = np.array([10.0, 11.0, 12.0, 13.0])


def _data(n: int, start: int = 0) -> np.ndarray:
    return (np.arange(n * 12, dtype="float64").reshape(n, 3, 4) + 100 * start)


def _monthly(tmp_path, name, months, start_month=0, calendar="standard"):
    import cftime

    stamps = [cftime.datetime(2000 + (start_month + i) // 12, (start_month + i) % 12 + 1, 15,
                              calendar=calendar) for i in range(months)]
    t = np.asarray(cftime.date2num(stamps, "days since 2000-01-01", calendar=calendar), dtype=float)
    return simple_grid(tmp_path / name, _data(months, start_month), lat=LAT, lon=LON, time=t,
                       calendar=calendar)


def test_multi_file_list_sorted_by_time(tmp_path):
    a = _monthly(tmp_path, "a.nc", 6, 0)
    b = _monthly(tmp_path, "b.nc", 6, 6)
    g = open_grid([b, a])  # given out of order
    assert g.sizes["time"] == 12
    assert_array_equal(g.values[:6], _data(6, 0))
    assert_array_equal(g.values[6:], _data(6, 6))
    assert str(g.time_start.values[6])[:10] == "2000-07-01"
    ident = json.loads(g.attrs["envlink_identity"])
    assert [f["path"] for f in ident["files"]] == [str(a.resolve()), str(b.resolve())]
    assert "2 files combined along time, sorted by time" in json.loads(g.attrs["envlink_conventions"])


def test_multi_file_glob(tmp_path):
    _monthly(tmp_path, "part1.nc", 3, 0)
    _monthly(tmp_path, "part2.nc", 3, 3)
    g = open_grid(str(tmp_path / "part*.nc"))
    assert g.sizes["time"] == 6
    assert str(g.time_end.values[-1])[:10] == "2000-07-01"


def test_multi_file_overlap_rejected(tmp_path):
    a = _monthly(tmp_path, "a.nc", 6, 0)
    b = _monthly(tmp_path, "b.nc", 6, 4)
    # steps shared by two files are a fault named with both files (docs/archives.md)
    with pytest.raises(GridError, match=r"'.*a\.nc' and '.*b\.nc' both hold the time stamp 135 "):
        open_grid([a, b])
    c = _monthly(tmp_path, "c.nc", 1, 5)
    with pytest.raises(GridError, match=r"'.*a\.nc' and '.*c\.nc' both hold"):
        open_grid([a, c])


def test_glob_without_match(tmp_path):
    with pytest.raises(InputError, match="matches no files"):
        open_grid(str(tmp_path / "nothing*.nc"))


def test_zarr_store_packed(tmp_path):
    raw = np.arange(24, dtype="int16").reshape(2, 3, 4) * 10
    raw[1, 2, 3] = -1
    ds = xr.Dataset(
        {"sst": (("time", "lat", "lon"), raw, {"units": "K", "scale_factor": 0.5, "add_offset": 270.0})},
        coords={
            "time": ("time", [0.0, 1.0], {"units": "days since 2000-01-01", "calendar": "noleap"}),
            "lat": ("lat", LAT, {"units": "degrees_north"}),
            "lon": ("lon", [0.0, 90.0, 180.0, 270.0], {"units": "degrees_east"}),
        },
    )
    store = tmp_path / "sst.zarr"
    ds.to_zarr(store, encoding={"sst": {"_FillValue": np.int16(-1)}}, zarr_format=3, consolidated=False)
    g = open_grid(store)
    by_hand = np.where(raw == -1, np.nan, cf_unpack(raw.astype(float), 0.5, 270.0)) - KELVIN_AT_ZERO_CELSIUS
    assert_allclose(g.values, by_hand[:, :, [2, 3, 0, 1]], rtol=0.0, atol=1e-12)
    assert g.time.values[0].calendar == "noleap"
    ident = json.loads(g.attrs["envlink_identity"])
    assert ident["files"][0]["files_in_store"] >= 4


def test_curvilinear_2d_lat_lon(tmp_path):
    ny, nx = 3, 4
    lat2 = np.linspace(-30, 30, ny)[:, None] + np.zeros((ny, nx)) + np.arange(nx)[None, :] * 0.1
    lon2 = np.linspace(170, 200, nx)[None, :] + np.zeros((ny, nx))  # crosses 180 as 0..360
    raw = np.arange(2 * ny * nx, dtype="float32").reshape(2, ny, nx)
    extra = {
        "nav_lat": (("nj", "ni"), lat2, {"units": "degrees_north", "standard_name": "latitude"}),
        "nav_lon": (("nj", "ni"), lon2, {"units": "degrees_east", "standard_name": "longitude"}),
    }
    p = write_nc(tmp_path / "curv.nc", raw, name="thetao", dims=("time_counter", "nj", "ni"),
                 coords={"time_counter": np.array([0.0, 1.0])},
                 coord_attrs={"time_counter": {"units": "days since 2000-01-01", "calendar": "noleap"}},
                 attrs={"units": "degC", "coordinates": "nav_lat nav_lon"}, extra=extra)
    g = open_grid(p)
    assert g.dims == ("time", "y", "x")
    assert g["lat"].dims == ("y", "x") and g["lon"].dims == ("y", "x")
    assert_allclose(g["lat"].values, lat2, rtol=0.0, atol=0.0)
    assert_allclose(g["lon"].values, ((lon2 + 180.0) % 360.0) - 180.0, rtol=0.0, atol=1e-12)
    assert g["lon"].values.max() < 180.0
    assert_array_equal(g.values, raw)
    assert g.attrs["envlink_layout"] == "curvilinear"


@pytest.mark.parametrize("fmt", ["NETCDF4", "NETCDF4_CLASSIC"])
@pytest.mark.parametrize("keep", [0.5, 0.999])
def test_truncated_hdf5_file_raises_grid_error_naming_path(tmp_path, fmt, keep):
    # The end-of-file address in the HDF5 superblock (HDF5 File Format Specification §II.A)
    # is larger than the truncated file.
    p = simple_grid(tmp_path / "whole.nc", _data(24), lat=LAT, lon=LON, time=np.arange(24.0), fmt=fmt)
    cut = tmp_path / "truncated.nc"
    cut.write_bytes(p.read_bytes()[: int(p.stat().st_size * keep)])
    with pytest.raises(GridError, match=r"'.*truncated\.nc' is truncated: it holds \d+ bytes"):
        open_grid(cut)


@pytest.mark.parametrize("fmt", ["NETCDF3_CLASSIC", "NETCDF3_64BIT_OFFSET"])
@pytest.mark.parametrize("keep", [0.5, 0.999])
def test_truncated_classic_file_raises_grid_error(tmp_path, fmt, keep):
    # The netCDF library opens these and reads the lost part as zeros: envlink must not.
    p = simple_grid(tmp_path / "whole.nc", _data(24), lat=LAT, lon=LON, time=np.arange(24.0), fmt=fmt)
    cut = tmp_path / "cut.nc"
    cut.write_bytes(p.read_bytes()[: int(p.stat().st_size * keep)])
    with pytest.raises(GridError, match=r"'.*cut\.nc' is truncated or corrupt"):
        open_grid(cut)
    assert open_grid(p).sizes["time"] == 24  # the whole file opens


def test_not_a_grid_file(tmp_path):
    p = tmp_path / "notes.nc"
    p.write_text("this is not netCDF\n")
    with pytest.raises(GridError, match=r"notes\.nc") as info:
        open_grid(p)
    # the message says what the file is, without the backend's list of engines and links
    msg = str(info.value)
    assert "it is not a netCDF (classic or netCDF-4/HDF5) or GeoTIFF file" in msg
    assert "begins with 'this is not netCDF '" in msg and "http" not in msg


def test_empty_and_table_files_are_named_as_such(tmp_path):
    empty = tmp_path / "empty.nc"
    empty.write_bytes(b"")
    with pytest.raises(GridError, match=r"it is empty \(0 bytes\)"):
        open_grid(empty)
    table = tmp_path / "sites.csv"
    table.write_text("lat,lon\n1,2\n")
    with pytest.raises(GridError, match=r"begins with 'lat,lon 1,2 '.*not tables"):
        open_grid(table)


def test_missing_file(tmp_path):
    with pytest.raises(GridError, match=r"'.*absent\.nc' does not exist"):
        open_grid(tmp_path / "absent.nc")


def test_unknown_variable_did_you_mean(tmp_path):
    p = simple_grid(tmp_path / "v.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.0, 1.0]), name="analysed_sst")
    with pytest.raises(InputError, match=r"'analysed_st' is not in .*Did you mean 'analysed_sst'\? Variables: "):
        open_grid(p, "analysed_st")


def test_several_variables_need_a_choice(tmp_path):
    extra = {"sst_err": (("time", "lat", "lon"), _data(2), {"units": "K"})}
    p = simple_grid(tmp_path / "two.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.0, 1.0]), extra=extra)
    with pytest.raises(InputError, match=r"several gridded variables: .*sst.*variable='NAME'"):
        open_grid(p)
    assert open_grid(p, "sst_err").attrs["envlink_variable"] == "sst_err"


def test_no_axes_found_says_what_was_looked_for(tmp_path):
    p = write_nc(tmp_path / "anon.nc", _data(2), name="v", dims=("t", "row", "col"),
                 coords={"t": np.array([0.0, 1.0]), "row": LAT, "col": LON},
                 coord_attrs={"t": {"units": "days since 2000-01-01"}}, attrs={"units": "degC"})
    with pytest.raises(InputError, match=r"No lat axis found .*standard_name='latitude'.*lat='NAME'"):
        open_grid(p)
    g = open_grid(p, lat="row", lon="col")
    axes = json.loads(g.attrs["envlink_axes"])
    assert axes["lat"] == {"name": "row", "found_by": "option lat='row'"}
    assert axes["time"]["found_by"] == "units 'days since 2000-01-01'"
    with pytest.raises(InputError, match=r"The lat axis 'rows' given with lat= is not in the grid. Did you mean 'row'"):
        open_grid(p, lat="rows", lon="col")


def test_missing_time_axis_and_static_grid(tmp_path):
    p = write_nc(tmp_path / "mmm.nc", _data(1)[0], name="mmm", dims=("lat", "lon"),
                 coords={"lat": LAT, "lon": LON},
                 coord_attrs={"lat": {"units": "degrees_north"}, "lon": {"units": "degrees_east"}},
                 attrs={"units": "degC"})
    with pytest.raises(InputError, match=r"No time axis found.*time=False"):
        open_grid(p)
    g = open_grid(p, time=False)
    assert g.dims == ("lat", "lon")
    assert_array_equal(g.values, _data(1)[0])
    assert "calendar" not in g.attrs


def test_extra_dimension_select_and_error(tmp_path):
    raw = np.arange(2 * 2 * 3 * 4, dtype="float64").reshape(2, 2, 3, 4)
    ca = {"time": {"units": "days since 2000-01-01"}, "depth": {"units": "m"},
          "lat": {"units": "degrees_north"}, "lon": {"units": "degrees_east"}}
    p = write_nc(tmp_path / "depth.nc", raw, name="thetao", dims=("time", "depth", "lat", "lon"),
                 coords={"time": np.array([0.0, 1.0]), "depth": np.array([0.5, 10.0]), "lat": LAT, "lon": LON},
                 coord_attrs=ca, attrs={"units": "degC"})
    with pytest.raises(InputError, match=r"extra dimension 'depth' of length 2; pick one level with select="):
        open_grid(p)
    g = open_grid(p, select={"depth": 9.0})
    assert_array_equal(g.values, raw[:, 1])
    assert "selected depth=10.0" in json.loads(g.attrs["envlink_conventions"])


def test_in_memory_dataset_and_dataarray():
    ds = xr.Dataset(
        {"t2m": (("time", "latitude", "longitude"), np.full((2, 3, 4), 300.0), {"units": "K"})},
        coords={"time": ("time", [0, 1], {"units": "days since 2000-01-01"}),
                "latitude": LAT[::-1], "longitude": LON + 180.0},
    )
    g = open_grid(ds)
    assert_allclose(g.values, 300.0 - KELVIN_AT_ZERO_CELSIUS, rtol=0.0, atol=1e-12)
    assert_array_equal(g.lat.values, LAT)
    ident = json.loads(g.attrs["envlink_identity"])
    assert ident["source"] == "in-memory" and len(ident["key"]) == 64
    decoded = xr.decode_cf(ds)["t2m"]  # already-decoded time (datetime64) is accepted too
    g2 = open_grid(decoded)
    assert_array_equal(g2.time_start.values, g.time_start.values)


def test_bad_time_option():
    with pytest.raises(InputError, match="'time' parameter of open_grid"):
        open_grid(xr.Dataset(), time=True)  # type: ignore[arg-type]


def test_projected_netcdf_with_grid_mapping(tmp_path):
    from pyproj import CRS

    wkt = CRS.from_epsg(32755).to_wkt()
    raw = np.arange(2 * 3 * 4, dtype="float32").reshape(2, 3, 4)
    y = np.array([5_902_500.0, 5_901_500.0, 5_900_500.0])  # descending, as rasters are
    x = np.array([500_500.0, 501_500.0, 502_500.0, 503_500.0])
    p = write_nc(tmp_path / "utm.nc", raw, name="tas", dims=("time", "y", "x"),
                 coords={"time": np.array([0.0, 1.0]), "y": y, "x": x},
                 coord_attrs={"time": {"units": "days since 2000-01-01"},
                              "y": {"standard_name": "projection_y_coordinate", "units": "m"},
                              "x": {"standard_name": "projection_x_coordinate", "units": "m"}},
                 attrs={"units": "degC", "grid_mapping": "crs"},
                 extra={"crs": ((), np.int32(0), {"crs_wkt": wkt})})
    g = open_grid(p)
    assert g.dims == ("time", "y", "x") and g.attrs["envlink_layout"] == "projected"
    assert_array_equal(g.y.values, y[::-1])
    assert_array_equal(g.values, raw[:, ::-1, :])
    assert CRS.from_wkt(g.attrs["crs_wkt"]).to_epsg() == 32755


@pytest.mark.requires_dask
def test_multi_file_and_zarr_stay_lazy(tmp_path):
    import dask.array as dsa

    a = _monthly(tmp_path, "a.nc", 3, 0)
    b = _monthly(tmp_path, "b.nc", 3, 3)
    g = open_grid([a, b])
    assert not g.variable._in_memory  # an archive: read file by file when values are asked for
    assert isinstance(open_grid([a, b], chunks={"time": 2}).data, dsa.Array)
    ds = xr.open_dataset(a, decode_cf=False)
    store = tmp_path / "a.zarr"
    ds.to_zarr(store, zarr_format=2, consolidated=True)  # Zarr 2 with .zmetadata
    gz = open_grid(store)
    assert isinstance(gz.data, dsa.Array)
    assert_array_equal(gz.values, _data(3, 0))


def test_projected_netcdf_with_cf_grid_mapping_parameters(tmp_path):
    from pyproj import CRS

    raw = np.zeros((1, 2, 2), dtype="float32")
    gm = {"grid_mapping_name": "transverse_mercator", "scale_factor_at_central_meridian": 0.9996,
          "longitude_of_central_meridian": 147.0, "latitude_of_projection_origin": 0.0,
          "false_easting": 500000.0, "false_northing": 10000000.0,
          "semi_major_axis": 6378137.0, "inverse_flattening": 298.257223563}
    p = write_nc(tmp_path / "tm.nc", raw, name="tas", dims=("time", "y", "x"),
                 coords={"time": np.array([0.0]), "y": np.array([1.0, 2.0]), "x": np.array([1.0, 2.0])},
                 coord_attrs={"time": {"units": "days since 2000-01-01"}},
                 attrs={"units": "degC", "grid_mapping": "crs"}, extra={"crs": ((), np.int32(0), gm)})
    g = open_grid(p)
    # pyproj builds the CRS from the CF grid-mapping attributes (CF §5.6, Appendix F).
    ref = CRS.from_cf(gm)
    assert CRS.from_wkt(g.attrs["crs_wkt"]).equals(ref)


def test_latitudes_beyond_90_are_refused(tmp_path):
    # common practice: a y axis in metres or swapped axes must not pass as latitude
    p = simple_grid(tmp_path / "y.nc", np.zeros((1, 2, 2)), lat=np.array([95.0, 100.0]),
                    lon=np.array([0.5, 1.5]), time=np.array([0.0]))
    with pytest.raises(GridError, match=r"latitude coordinate runs 95\.\.100, beyond -90\.\.90 .*with lat='NAME'"):
        open_grid(p)


def test_time_axis_of_length_zero_is_a_grid_error_naming_the_file(tmp_path):
    # A grid needs at least one time step to hold data (CF Conventions v1.11 §4.4: the time
    # coordinate locates each step); an empty axis is unreadable input, named with its file,
    # not an IndexError from cell inference.
    p = simple_grid(tmp_path / "emptytime.nc", np.zeros((0, 3, 4)), lat=LAT, lon=LON,
                    time=np.zeros(0))
    with pytest.raises(GridError, match=r"time axis 'time' of .*emptytime\.nc has no steps"):
        open_grid(p)
    # The same file written by xarray with an unlimited time dimension (netCDF4 library).
    ds = xr.Dataset({"sst": (("time", "lat", "lon"), np.zeros((0, 3, 4)), {"units": "degC"})},
                    coords={"time": ("time", np.zeros(0), {"units": "days since 2000-01-01"}),
                            "lat": ("lat", LAT, {"units": "degrees_north"}),
                            "lon": ("lon", LON, {"units": "degrees_east"})})
    ds.to_netcdf(tmp_path / "unlimited.nc", unlimited_dims=["time"])
    with pytest.raises(GridError, match=r"unlimited\.nc has no steps \(length 0\)"):
        open_grid(tmp_path / "unlimited.nc")
