"""GeoTIFF rasters written with rasterio in a projected CRS (EPSG:32755, UTM zone 55 S).

Coordinates are checked against the affine transform written (cell centres at
``x0 + (j + 0.5) * dx``, the GDAL/rasterio "area" convention), values against the
raw bands, and site projection against pyproj.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from envlink import InputError, open_grid
from envlink.grids import project_sites

pytestmark = [
    pytest.mark.requires_geotiff,
    # rasterio 1.4 uses the deprecated affine "*" internally when writing; not ours to fix
    pytest.mark.filterwarnings("ignore:Use `@` matmul:PendingDeprecationWarning"),
]

X0, Y0, DX = 500_000.0, 5_900_000.0, 1_000.0  # upper-left corner, 1 km cells
NY, NX, NB = 3, 4, 3


def _write_tif(path, data, *, epsg=32755, nodata=None, scale=None, offset=None, units=None,
               transform=None):
    import rasterio
    from rasterio.crs import CRS
    from rasterio.transform import from_origin

    tr = transform or from_origin(X0, Y0, DX, DX)
    profile = {"driver": "GTiff", "height": data.shape[1], "width": data.shape[2], "count": data.shape[0],
               "dtype": data.dtype.name, "crs": CRS.from_epsg(epsg), "transform": tr}
    if nodata is not None:
        profile["nodata"] = nodata
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data)
        if scale is not None:
            dst.scales = [scale] * data.shape[0]
            dst.offsets = [offset or 0.0] * data.shape[0]
        if units is not None:
            dst.units = [units] * data.shape[0]
    return path


def test_projected_geotiff_bands_to_dates(tmp_path):
    from pyproj import CRS

    raw = np.arange(NB * NY * NX, dtype="int16").reshape(NB, NY, NX) * 10
    raw[1, 0, 0] = -9999
    p = _write_tif(tmp_path / "sst.tif", raw, nodata=-9999, scale=0.01, offset=273.15, units="K")
    dates = ["2001-01-01", "2001-02-01", "2001-03-01"]
    g = open_grid(p, band_dates=dates)
    assert g.dims == ("time", "y", "x")
    assert CRS.from_wkt(g.attrs["crs_wkt"]).to_epsg() == 32755
    # Cell centres from the affine transform; y made ascending (rows reversed).
    assert_allclose(g.x.values, X0 + (np.arange(NX) + 0.5) * DX, rtol=0.0, atol=1e-6)
    assert_allclose(g.y.values, (Y0 - (np.arange(NY) + 0.5) * DX)[::-1], rtol=0.0, atol=1e-6)
    # CF §8.1-style unpacking of the raw band values, nodata as missing, K -> degC.
    by_hand = np.where(raw == -9999, np.nan, raw * 0.01 + 273.15) - 273.15
    assert_allclose(g.values, by_hand[:, ::-1, :], rtol=0.0, atol=1e-9)
    assert [str(t)[:10] for t in g.time.values] == dates
    assert str(g.time_end.values[-1])[:10] == "2001-04-01"  # monthly cells inferred
    conv = json.loads(g.attrs["envlink_conventions"])
    assert "y flipped to ascending" in conv and "units K -> degC (x -273.15)" in conv


def test_band_date_pairs_give_cells(tmp_path):
    raw = np.ones((2, NY, NX), dtype="float32")
    p = _write_tif(tmp_path / "w.tif", raw, units="degC")
    g = open_grid(p, band_dates=[("2001-01-01", "2001-01-08"), ("2001-01-08", "2001-01-15")])
    assert str(g.time_end.values[0])[:10] == "2001-01-08"
    assert str(g.time_end.values[1])[:10] == "2001-01-15"


def test_geographic_geotiff_becomes_lat_lon(tmp_path):
    from rasterio.transform import from_origin

    raw = np.arange(NY * NX, dtype="float32").reshape(1, NY, NX)
    p = _write_tif(tmp_path / "geo.tif", raw, epsg=4326, units="degC",
                   transform=from_origin(170.0, 10.0, 5.0, 5.0))  # lon 172.5 .. 187.5
    g = open_grid(p, time=False)
    assert g.dims == ("lat", "lon")
    assert_array_equal(g.lat.values, [-2.5, 2.5, 7.5])
    assert_array_equal(g.lon.values, [-177.5, -172.5, 172.5, 177.5])
    # lon 182.5 -> -177.5 and 187.5 -> -172.5 move first; rows reversed to ascending lat.
    assert_array_equal(g.values, raw[0, ::-1, :][:, [2, 3, 0, 1]])
    assert "crs_wkt" not in g.attrs


def test_band_dates_required_and_counted(tmp_path):
    p = _write_tif(tmp_path / "b.tif", np.ones((NB, NY, NX), dtype="float32"), units="degC")
    with pytest.raises(InputError, match=r"has 3 band\(s\) and no time axis; give band_dates="):
        open_grid(p)
    with pytest.raises(InputError, match=r"band_dates gives 2 date\(s\) but the GeoTIFF has 3 band\(s\)"):
        open_grid(p, band_dates=["2001-01-01", "2001-02-01"])


def test_geotiff_without_units_asks_for_them(tmp_path):
    p = _write_tif(tmp_path / "nu.tif", np.ones((1, NY, NX), dtype="float32"))
    with pytest.raises(InputError, match="has no units attribute. Declare its units with units="):
        open_grid(p, band_dates=["2001-01-01"])
    g = open_grid(p, band_dates=["2001-01-01"], units="degC")
    assert g.attrs["units"] == "degC"


def test_project_sites_matches_pyproj():
    from pyproj import CRS, Transformer

    lat = np.array([-37.0, -38.5, -36.2])
    lon = np.array([147.0, 146.1, 148.9])
    wkt = CRS.from_epsg(32755).to_wkt()
    x, y = project_sites(lat, lon, wkt)
    ex, ey = Transformer.from_crs("EPSG:4326", "EPSG:32755", always_xy=True).transform(lon, lat)
    assert_allclose(x, ex, rtol=0.0, atol=1e-6)
    assert_allclose(y, ey, rtol=0.0, atol=1e-6)
    # On the zone's central meridian (147° E) the false easting is exactly 500 000 m.
    assert_allclose(x[0], 500_000.0, rtol=0.0, atol=1e-6)


def test_file_stem_clashing_with_a_coordinate_name(tmp_path):
    p = _write_tif(tmp_path / "x.tif", np.ones((1, NY, NX), dtype="float32"), units="degC")
    g = open_grid(p, band_dates=["2001-01-01"])
    assert g.name == "band_data" and g.attrs["calendar"] == "proleptic_gregorian"


# --------------------------------------------- a GeoTIFF that GDAL made from a netCDF file
def _gdal_from_netcdf(path, *, calendar="360_day", dims="{time}", values=(0, 30, 60)):
    """A GeoTIFF shaped as GDAL's netCDF driver writes one: NETCDF_DIM_* dataset and band tags,
    the variable's attributes as 'sst#units' tags, packed int16 with scale/offset and nodata."""
    import rasterio
    from rasterio.transform import from_origin

    raw = (np.arange(3 * 2 * 4, dtype="int16").reshape(3, 2, 4) * 10)
    raw[2, 1, 3] = -999
    profile = {"driver": "GTiff", "height": 2, "width": 4, "count": 3, "dtype": "int16",
               "crs": "EPSG:4326", "transform": from_origin(-120.0, -8.0, 1.0, 1.0), "nodata": -999}
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(raw)
        dst.scales, dst.offsets = [0.01] * 3, [20.0] * 3
        dst.update_tags(NETCDF_DIM_EXTRA=dims, NETCDF_DIM_time_DEF="{3,6}",
                        NETCDF_DIM_time_VALUES="{" + ",".join(map(str, values)) + "}",
                        **{"time#units": "days since 2001-01-01 00:00:00", "time#calendar": calendar,
                           "time#standard_name": "time", "sst#units": "degC",
                           "sst#long_name": "sea surface temperature", "NC_GLOBAL#title": "invented"})
        for band, v in enumerate(values, start=1):
            dst.update_tags(band, NETCDF_DIM_time=str(v), NETCDF_VARNAME="sst")
    return path, raw


def test_a_gdal_geotiff_from_netcdf_opens_with_its_recorded_time_axis(tmp_path):
    p, raw = _gdal_from_netcdf(tmp_path / "sst_from_nc.tif")
    g = open_grid(p)  # no band dates: the file says them (it used to fail with KeyError: 'band')
    assert g.name == "sst" and g.attrs["units"] == "degC" and g.attrs["calendar"] == "360_day"
    # days 0, 30 and 60 since 2001-01-01 in the 360_day calendar (CF §4.4.1: 30-day months)
    assert [str(t)[:10] for t in g.time.values] == ["2001-01-01", "2001-02-01", "2001-03-01"]
    # CF §8.1 unpacking: raw * scale_factor + add_offset, nodata missing; rows to ascending lat
    by_hand = np.where(raw == -999, np.nan, raw * 0.01 + 20.0)[:, ::-1, :]
    assert_allclose(g.values, by_hand, rtol=0.0, atol=1e-9)


def test_band_dates_given_win_over_the_recorded_axis(tmp_path):
    p, _ = _gdal_from_netcdf(tmp_path / "sst_from_nc.tif", calendar="standard")
    g = open_grid(p, band_dates="R/2005-06-01/P1D")
    assert [str(t)[:10] for t in g.time.values] == ["2005-06-01", "2005-06-02", "2005-06-03"]


def test_a_gdal_geotiff_over_two_netcdf_axes_is_refused_in_words(tmp_path):
    p, _ = _gdal_from_netcdf(tmp_path / "two.tif", dims="{depth,time}")
    with pytest.raises(InputError, match=r"bands run over 2 axes \(depth, time\).*Open the netCDF file itself"):
        open_grid(p)


# ------------------------------------------------------------------------ band date forms
def test_band_dates_as_text_intervals_and_repeating_intervals(tmp_path):
    from envlink.grids.geotiff import band_times

    p = _write_tif(tmp_path / "m.tif", np.ones((NB, NY, NX), dtype="float32"), units="degC")
    listed = open_grid(p, band_dates="2001-01-01, 2001-02-01,2001-03-01")
    monthly = open_grid(p, band_dates="R3/2001-01-01/P1M")
    assert_array_equal(listed.time.values, monthly.time.values)
    # ISO 8601 repeating interval: three whole months, bounds given outright
    assert [str(t)[:10] for t in monthly.time_end.values] == ["2001-02-01", "2001-03-01", "2001-04-01"]
    weekly = open_grid(p, band_dates="2001-01-01/2001-01-08,2001-01-08/2001-01-15,2001-01-15/2001-01-22")
    assert [str(t)[:10] for t in weekly.time_end.values] == ["2001-01-08", "2001-01-15", "2001-01-22"]
    # days since 1970-01-01 (proleptic Gregorian, by hand): 2001-01-31 is day 11353; a month on
    # from a start on the 31st is the month's last day (28 February)
    t, b = band_times("R/2001-01-31/P1M", 2)
    assert b.tolist() == [[11353.0, 11381.0], [11381.0, 11412.0]]
    with pytest.raises(InputError, match=r"repeats 12 times but the GeoTIFF has 3 band"):
        open_grid(p, band_dates="R12/2001-01-01/P1M")
    with pytest.raises(InputError, match=r"band 2's date '2001-02-31' is not an ISO|not a day of the"):
        open_grid(p, band_dates="2001-01-01,2001-02-31,2001-03-01")


def test_a_repeating_interval_with_a_bad_part_names_that_part(tmp_path, capsys):
    # checked against ISO 8601-1:2019 (repeating intervals R[n]/start/duration; durations
    # PnYnMnWnDTnHnMnS): 'Q' is no duration unit, so the message is about the duration,
    # not about the count of dates
    from envlink.cli import main
    from envlink.grids.geotiff import band_times

    with pytest.raises(InputError, match=r"the duration 'P1Q' is not an ISO 8601 duration.*R/2010-01-01/P1M"):
        band_times("R/2010-01-01/P1Q", 12)
    with pytest.raises(InputError, match=r"'PT1H' is an ISO 8601 duration this reader does not take"):
        band_times("R/2010-01-01/PT1H", 12)
    with pytest.raises(InputError, match=r"the start '2010-1-01' is not an ISO 8601 date"):
        band_times("R/2010-1-01/P1M", 12)
    with pytest.raises(InputError, match=r"expected three parts"):
        band_times("R/2010-01-01", 12)
    p = _write_tif(tmp_path / "m.tif", np.ones((NB, NY, NX), dtype="float32"), units="degC")
    assert main(["grid", str(p), "--band-dates", "R/2010-01-01/P1Q"]) == 2
    err = capsys.readouterr().err
    assert "'P1Q' is not an ISO 8601 duration" in err and "--band-dates" in err and "date(s)" not in err


def test_band_dates_are_read_in_the_calendar_given(tmp_path):
    p = _write_tif(tmp_path / "c.tif", np.ones((2, NY, NX), dtype="float32"), units="degC")
    g = open_grid(p, band_dates=["2001-02-29", "2001-02-30"], calendar="360_day")
    assert g.attrs["calendar"] == "360_day"
    assert [str(t)[:10] for t in g.time.values] == ["2001-02-29", "2001-02-30"]  # days of 360_day
    with pytest.raises(InputError, match=r"band 1's date 2001-02-29 is not a day of the proleptic_gregorian"):
        open_grid(p, band_dates=["2001-02-29", "2001-03-01"])


# ------------------------------------------------ the command line and the project file
@pytest.fixture
def located(tmp_path, monkeypatch):
    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    t = tmp_path / "located.csv"
    t.write_text("id,site_lat,site_lon,period_start,period_end,locate_status\n"
                 "1,-9.5,-119.5,2001-02-01,2001-02-28,ok\n", encoding="utf-8")
    return t


def test_attach_takes_band_dates_units_and_calendar_options(tmp_path, located, capsys):
    from envlink.cli import main

    raw = np.stack([np.full((2, 4), 10.0 * (k + 1), dtype="float32") for k in range(3)])
    from rasterio.transform import from_origin

    p = _write_tif(tmp_path / "air.tif", raw, epsg=4326, transform=from_origin(-120.0, -8.0, 1.0, 1.0))
    out = tmp_path / "out.csv"
    rc = main(["attach", str(located), "--grid", str(p), "--name", "air", "-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2 and "--band-dates" in err and "band_dates=" not in err
    rc = main(["attach", str(located), "--grid", str(p), "--name", "air", "--band-dates", "R/2001-01-01/P1M",
               "--units", "degC", "--calendar", "noleap", "-o", str(out)])
    assert rc == 0
    import pandas as pd

    assert_allclose(pd.read_csv(out)["air"], [20.0], rtol=0, atol=1e-12)  # the February band


def test_grid_command_takes_a_repeating_interval(tmp_path, capsys):
    from envlink.cli import main

    p = _write_tif(tmp_path / "m.tif", np.ones((NB, NY, NX), dtype="float32"), units="degC")
    assert main(["grid", str(p), "--band-dates", "R/2001-01-01/P1M", "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert "2001-01-01" in json.dumps(info) and "2001-04-01" in json.dumps(info)


def test_project_grids_table_takes_band_dates_units_and_calendar(tmp_path, located):
    from rasterio.transform import from_origin

    from envlink.project import run_project

    raw = np.stack([np.full((2, 4), 10.0 * (k + 1), dtype="float32") for k in range(3)])
    _write_tif(tmp_path / "air.tif", raw, epsg=4326, transform=from_origin(-120.0, -8.0, 1.0, 1.0))
    (tmp_path / "t.csv").write_text("id,lat,lon,start,end\n1,-9.5,-119.5,2001-02-01,2001-02-28\n")
    (tmp_path / "p.toml").write_text(
        '[studies]\npath = "t.csv"\n[locate]\nlat = "lat"\nlon = "lon"\nstart = "start"\nend = "end"\n'
        '[grids.air]\npath = "air.tif"\nunits = "degC"\ncalendar = "noleap"\n'
        'band_dates = [2001-01-01, "2001-02-01", ["2001-03-01", "2001-04-01"]]\n'
        '[[covariates]]\nname = "air"\ngrid = "air"\n[export]\nformats = ["csv"]\nreport = false\n',
        encoding="utf-8")
    with pytest.raises(InputError, match="must be all dates or all"):
        run_project(tmp_path / "p.toml", out=tmp_path / "o1", progress=False)
    text = (tmp_path / "p.toml").read_text().replace(
        'band_dates = [2001-01-01, "2001-02-01", ["2001-03-01", "2001-04-01"]]',
        'band_dates = [2001-01-01, "2001-02-01", "2001-03-01"]')
    (tmp_path / "p.toml").write_text(text, encoding="utf-8")
    r = run_project(tmp_path / "p.toml", out=tmp_path / "o2", progress=False)
    assert_allclose(r.table["air"], [20.0], rtol=0, atol=1e-12)
