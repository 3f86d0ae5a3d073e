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
