"""Spatial rules: nearest, bilinear, nearest-valid, buffer, polygon; curvilinear and projected grids."""

from __future__ import annotations

import numpy as np
import pyproj
import shapely
from numpy.testing import assert_allclose
from shapely.geometry import Polygon

from envlink.extract.attach import attach
from envlink.geo import cell_area_km2, great_circle_km
from envlink.testing import make_grid

from ._grids import curvilinear, projected, table

GLOBAL_LAT = np.arange(-89.5, 90.0, 1.0)
GLOBAL_LON = np.arange(-179.5, 180.0, 1.0)


def test_nearest_flags_outside_points_never_an_edge_cell():
    g = make_grid(lat=[0.5, 1.5], lon=[10.5, 11.5], periods=2, seed=1)
    t = table([1.99, 2.01, 0.0, 1.0], [11.99, 11.5, 10.0, 9.99], "2000-01-01", "2000-01-31")
    out = attach(t, g, name="v")
    assert_allclose(out["v"][:1], [g.values[0, 1, 1]], rtol=1e-12)
    assert out["v_flags"].tolist() == ["", "outside_grid", "", "outside_grid"]
    assert np.isnan(out["v"][1]) and np.isnan(out["v"][3])
    # the edge itself belongs to the grid (its lowest corner cell)
    assert_allclose(out["v"][2], g.values[0, 0, 0], rtol=1e-12)


def test_nearest_float64_ties_and_distance():
    # a site exactly on the edge between two cells goes to the upper cell, in float64
    lat = np.array([0.125, 0.375], dtype=np.float32).astype(np.float64)
    g = make_grid(lat=lat, lon=[0.125], periods=1, seed=2)
    out = attach(table([0.25], [0.125], "2000-01-01", "2000-01-31"), g, name="v")
    assert out["v_cell_lat"][0] == 0.375
    # distance: great-circle km from the site to the cell centre (closed form R·Δφ)
    assert_allclose(out["v_distance_km"][0], 6371.0088 * np.radians(0.125), rtol=1e-9)


def test_global_grid_wraps_longitudes():
    g = make_grid(lat=GLOBAL_LAT, lon=GLOBAL_LON, periods=1, seed=3)
    out = attach(table([0.2, 0.2], [179.99, -180.0], "2000-01-01", "2000-01-31"), g, name="v")
    assert out["v_cell_lon"].tolist() == [179.5, -179.5]
    assert out["v_flags"].tolist() == ["", ""]


def test_bilinear_exact_on_linear_field():
    lat, lon = np.arange(0.0, 5.0), np.arange(10.0, 16.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    field = 3.0 + 2.0 * la - 0.5 * lo  # linear: bilinear interpolation reproduces it exactly
    g = make_grid(np.stack([field, field + 1.0]), lat=lat, lon=lon)
    rng = np.random.default_rng(5)
    slat, slon = rng.uniform(0.0, 4.0, 30), rng.uniform(10.0, 15.0, 30)
    out = attach(table(slat, slon, "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    assert_allclose(out["v"], 3.0 + 2.0 * slat - 0.5 * slon, rtol=1e-12)
    assert (out["v_flags"] == "").all()


def test_bilinear_wraps_across_the_antimeridian():
    # field equal to the unwrapped longitude near 180°: cells at 179.5 (value 179.5)
    # and -179.5 (value 180.5); a site at 179.9 lies 0.4 of the way: 179.9
    la, lo = np.meshgrid(GLOBAL_LAT, GLOBAL_LON, indexing="ij")
    field = np.where(lo < 0, lo + 360.0, lo)
    g = make_grid(field[None], lat=GLOBAL_LAT, lon=GLOBAL_LON)
    out = attach(table([0.5, 0.5], [179.9, -179.9], "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    assert_allclose(out["v"], [179.9, 180.1], rtol=1e-12)


def test_bilinear_missing_neighbour_renormalised_and_flagged():
    v = np.array([[[1.0, 2.0], [3.0, np.nan]]])
    g = make_grid(v, lat=[0.0, 1.0], lon=[0.0, 1.0])
    out = attach(table([0.5], [0.5], "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    # weights 1/4 each; the missing one dropped and the rest renormalised: (1+2+3)/3
    assert_allclose(out["v"], [2.0], rtol=1e-12)
    assert out["v_flags"][0] == "bilinear_missing_neighbour"


def _coast_grid():
    lat = np.arange(-4.875, 5.0, 0.25)
    lon = np.arange(-4.875, 5.0, 0.25)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    field = 25.0 + 0.1 * la + 0.01 * lo
    vals = np.repeat(field[None], 24, axis=0)
    vals[:, :, lon > 0.0] = np.nan  # land east of 0°
    # one ocean cell that has data only in the first year
    vals[12:, 20, 19] = np.nan
    return make_grid(vals, lat=lat, lon=lon), lat, lon


def test_nearest_valid_moves_coastal_sites_and_says_how_far():
    g, lat, lon = _coast_grid()
    t = table([1.1, 1.1, 1.1, 0.125], [0.05, 2.0, -0.2, -0.1],
              ["2000-01-01", "2000-01-01", "2000-01-01", "2001-03-01"],
              ["2000-12-31", "2000-12-31", "2000-12-31", "2001-05-31"])
    out = attach(t, g, name="v", spatial="nearest-valid:30km")
    # row 0: on land at 0.05°E; the nearest ocean centre is (1.125, -0.125), ~19.5 km
    assert_allclose(out["v_cell_lat"][0], 1.125, rtol=0, atol=0)
    assert_allclose(out["v_cell_lon"][0], -0.125, rtol=0, atol=0)
    d = float(great_circle_km(1.1, 0.05, 1.125, -0.125))
    assert_allclose(out["v_distance_km"][0], d, rtol=1e-9)
    assert out["v_flags"][0] == f"nearest_valid_{round(d)}km"
    assert_allclose(out["v"][0], 25.0 + 0.1 * 1.125 - 0.01 * 0.125, rtol=1e-12)
    # row 1: 2°E is more than 30 km from any ocean cell
    assert np.isnan(out["v"][1]) and out["v_flags"][1] == "no_valid_cell_within_30km"
    # row 2: already on an ocean cell: no flag
    assert out["v_flags"][2] == "" and out["v_cell_lon"][2] == -0.125
    # row 3: its cell (0.125, -0.125) has data only in 2000; valid means data in the
    # row's own window, so a neighbour is used
    assert out["v_flags"][3].startswith("nearest_valid_")
    assert (out["v_cell_lat"][3], out["v_cell_lon"][3]) != (0.125, -0.125)
    assert out["v_coverage"][3] == 1.0


def test_nearest_valid_short_of_coverage_everywhere_keeps_the_own_cell_and_says_so():
    # docs/extract.md, nearest-valid: a cell is valid with data in the row's window at
    # min_coverage; with none, a site whose own cell has some data keeps it, with that
    # cell's coverage (the fraction of the window's days with data) and its coverage flags.
    g, lat, lon = _coast_grid()
    # 1999-01-01 .. 2000-03-31: only January-March 2000 (91 of 456 days) is on the grid
    t = table([1.1, 1.1], [-0.2, 2.0], "1999-01-01", "2000-03-31")
    near = attach(t, g, name="v", spatial="nearest")
    out = attach(t, g, name="v", spatial="nearest-valid:30km")
    assert_allclose(near["v_coverage"][0], 91 / 456, rtol=1e-12)
    assert near["v_flags"][0] == "partial_coverage;below_min_coverage"
    assert out["v_flags"][0] == "no_valid_cell_within_30km;partial_coverage;below_min_coverage"
    assert_allclose(out["v_coverage"][0], 91 / 456, rtol=1e-12)
    assert np.isnan(out["v"][0])
    assert (out["v_cell_lat"][0], out["v_cell_lon"][0], out["v_distance_km"][0]) == (
        near["v_cell_lat"][0], near["v_cell_lon"][0], near["v_distance_km"][0])
    # a site on land with no data anywhere within 30 km: no cell to keep, as before
    assert out["v_flags"][1] == "no_valid_cell_within_30km" and out["v_coverage"][1] == 0.0
    assert np.isnan(out["v_cell_lat"][1])


def test_buffer_area_weighted_mean():
    lat = np.arange(40.125, 45.0, 0.25)
    lon = np.arange(0.125, 5.0, 0.25)
    g = make_grid(lat=lat, lon=lon, periods=1, seed=7)
    out = attach(table([42.3], [2.2], "2000-01-01", "2000-01-31"), g, name="v", spatial="buffer:30km")
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    inside = great_circle_km(42.3, 2.2, la, lo) <= 30.0
    # weights: exact spherical cell areas, closed form R²Δλ(sin φ₂ − sin φ₁)
    w = cell_area_km2(la - 0.125, la + 0.125, 0.25)
    expected = np.sum(g.values[0][inside] * w[inside]) / np.sum(w[inside])
    assert_allclose(out["v"], [expected], rtol=1e-12)
    small = attach(table([42.3], [2.2], "2000-01-01", "2000-01-31"), g, name="v", spatial="buffer:1km")
    assert small["v_flags"][0] == "buffer_smaller_than_cell"


def test_polygon_rule_area_weights_against_shapely_laea():
    lat = np.arange(-1.75, 2.0, 0.5)
    lon = np.arange(30.25, 34.0, 0.5)
    g = make_grid(lat=lat, lon=lon, periods=1, seed=8)
    poly = Polygon([(30.7, -0.9), (32.3, -0.6), (31.9, 0.8), (30.9, 0.4)])
    t = table([0.0, 1.0], [31.5, 33.0], "2000-01-01", "2000-01-31", site_wkt=[poly.wkt, ""])
    out = attach(t, g, name="v", spatial="polygon")
    # reference weights: shapely intersection areas on a pyproj LAEA (equal-area) projection
    laea = pyproj.Transformer.from_crs("EPSG:4326", "+proj=laea +lat_0=0 +lon_0=31.5 +R=6371008.8", always_xy=True)

    def to(geom):
        geom = shapely.segmentize(geom, 0.01)
        return shapely.transform(geom, lambda xy: np.column_stack(laea.transform(xy[:, 0], xy[:, 1])))

    p = to(poly)
    num = den = 0.0
    for j, a in enumerate(lat):
        for i, b in enumerate(lon):
            area = p.intersection(to(shapely.box(b - 0.25, a - 0.25, b + 0.25, a + 0.25))).area
            num += area * g.values[0, j, i]
            den += area
    assert_allclose(out["v"][0], num / den, rtol=1e-4)
    # a point site under the polygon rule uses its nearest cell, flagged
    assert out["v_flags"][1] == "point_site_nearest_cell"


def test_polygon_across_antimeridian_and_smaller_than_cell():
    g = make_grid(np.broadcast_to(np.where(GLOBAL_LON > 0, 1.0, 3.0), (1, 180, 360)).copy(), lat=GLOBAL_LAT, lon=GLOBAL_LON)
    across = Polygon([(179.5, 10.2), (-179.5, 10.2), (-179.5, 10.8), (179.5, 10.8)])
    tiny = Polygon([(20.1, 5.1), (20.2, 5.1), (20.2, 5.2), (20.1, 5.2)])
    t = table([10.5, 5.15], [180.0 - 1e-9, 20.15], "2000-01-01", "2000-01-31", site_wkt=[across.wkt, tiny.wkt])
    out = attach(t, g, name="v", spatial="polygon")
    # half the polygon in the 179.5°E column (value 1), half in -179.5° (value 3)
    assert_allclose(out["v"][0], 2.0, rtol=1e-9)
    assert out["v_flags"][1] == "polygon_smaller_than_cell"
    assert_allclose(out["v"][1], 1.0, rtol=0, atol=0)


def test_curvilinear_nearest_is_great_circle_nearest():
    ny, nx = 15, 20
    jj, ii = np.meshgrid(np.arange(ny), np.arange(nx), indexing="ij")
    lat2 = -10.0 + 0.5 * jj + 0.1 * ii
    lon2 = 120.0 + 0.5 * ii - 0.1 * jj
    vals = np.random.default_rng(9).normal(20, 1, (2, ny, nx))
    g = curvilinear(vals, lat2, lon2)
    rng = np.random.default_rng(10)
    slat, slon = rng.uniform(-8, -4, 25), rng.uniform(122, 127, 25)
    out = attach(table(slat, slon, "2000-01-01", "2000-01-31"), g, name="v")
    d = great_circle_km(slat[:, None], slon[:, None], lat2.ravel()[None], lon2.ravel()[None])
    k = d.argmin(axis=1)  # brute force over every cell centre
    assert_allclose(out["v"], vals[0].ravel()[k], rtol=1e-12)
    assert_allclose(out["v_distance_km"], d.min(axis=1), rtol=1e-9)
    far = attach(table([40.0], [10.0], "2000-01-01", "2000-01-31"), g, name="v")
    assert far["v_flags"][0] == "outside_grid"


def test_projected_grid_cell_containing_site():
    crs = pyproj.CRS.from_proj4("+proj=laea +lat_0=50 +lon_0=10 +ellps=WGS84")
    x = np.arange(-95_000.0, 100_000.0, 10_000.0)
    y = np.arange(95_000.0, -100_000.0, -10_000.0)  # descending y, as many files store it
    vals = np.random.default_rng(11).normal(10, 2, (1, y.size, x.size))
    g = projected(vals, x, y, crs.to_wkt())
    slat, slon = np.array([50.3, 49.4, 60.0]), np.array([10.2, 9.5, 10.0])
    out = attach(table(slat, slon, "2000-01-01", "2000-01-31"), g, name="v")
    fwd = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    px, py = fwd.transform(slon[:2], slat[:2])
    ix = np.floor((np.asarray(px) + 100_000.0) / 10_000.0).astype(int)
    iy = np.floor((100_000.0 - np.asarray(py)) / 10_000.0).astype(int)
    assert_allclose(out["v"][:2], vals[0, iy, ix], rtol=1e-12)
    inv = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    clon, clat = inv.transform(x[ix], y[iy])
    assert_allclose(out["v_distance_km"][:2], great_circle_km(slat[:2], slon[:2], clat, clon), rtol=1e-9)
    assert out["v_flags"][2] == "outside_grid"


def test_polygon_on_projected_equal_area_grid():
    # LAEA (equal area): weights are the polygon's area in each 10 km cell, checked
    # against shapely on the same projection of the densified lon/lat polygon (pyproj)
    crs = pyproj.CRS.from_proj4("+proj=laea +lat_0=50 +lon_0=10 +ellps=WGS84")
    x = np.arange(-95_000.0, 100_000.0, 10_000.0)
    y = np.arange(95_000.0, -100_000.0, -10_000.0)
    vals = np.random.default_rng(12).normal(10, 2, (1, y.size, x.size))
    g = projected(vals, x, y, crs.to_wkt())
    poly = Polygon([(9.8, 49.8), (10.4, 49.85), (10.3, 50.3), (9.9, 50.2)])
    out = attach(table([50.0], [10.0], "2000-01-01", "2000-01-31", site_wkt=[poly.wkt]), g, name="v", spatial="polygon")
    fwd = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    p = shapely.transform(shapely.segmentize(poly, 0.001), lambda xy: np.column_stack(fwd.transform(xy[:, 0], xy[:, 1])))
    num = den = 0.0
    for j, yc in enumerate(y):
        for i, xc in enumerate(x):
            a = p.intersection(shapely.box(xc - 5000, yc - 5000, xc + 5000, yc + 5000)).area
            num += a * vals[0, j, i]
            den += a
    assert_allclose(out["v"][0], num / den, rtol=1e-5)
    assert out["v_flags"][0] == ""


def test_regional_grid_across_antimeridian_flags_sites_in_its_longitude_gap():
    # A grid from 170°E to 170°W, stored in [-180, 180) as -179.5..-170.5 then
    # 170.5..179.5: sites at 0° or 165°W lie beyond its edges (docs/extract.md, `nearest`).
    lon = np.concatenate([np.arange(-179.5, -170.0, 1.0), np.arange(170.5, 180.0, 1.0)])
    v = np.arange(2.0 * 3 * lon.size).reshape(2, 3, lon.size)
    g = make_grid(v, lat=[-0.5, 0.5, 1.5], lon=lon, start="2000-01-01", freq="MS")
    t = table([0.2, 0.2, 0.2, 0.2, 0.2], [179.9, -179.9, 0.0, -165.0, 170.2], "2000-01-01", "2000-01-31")
    for rule in ("nearest", "bilinear", "buffer:50km", "nearest-valid:100km"):
        out = attach(t, g, name="v", spatial=rule)
        assert out["v_flags"].tolist()[2:4] == ["outside_grid", "outside_grid"], rule
        assert np.isnan(out["v"][2:4]).all() and np.isnan(out["v_cell_lat"][2:4]).all()
        assert np.isfinite(out["v"][[0, 1, 4]]).all(), rule
    near = attach(t, g, name="v")
    assert_allclose(near["v"][[0, 1, 4]], v[0, 1, [19, 0, 10]], rtol=1e-12)


def test_stretched_regional_grid_has_no_longitude_gap():
    # Spacing growing eastwards (1, 1, 2, 4 degrees) is not a gap: a site between
    # two centres belongs to the cell whose edges (midpoints) contain it.
    lon = np.array([0.5, 1.5, 2.5, 4.5, 8.5])
    g = make_grid(np.arange(10.0).reshape(2, 1, 5), lat=[0.5], lon=lon, start="2000-01-01", freq="MS")
    out = attach(table([0.5, 0.5], [6.0, 7.0], "2000-01-01", "2000-01-31"), g, name="v")
    assert out["v_flags"].tolist() == ["", ""]
    assert_allclose(out["v"], [3.0, 4.0], rtol=1e-12)


def test_polygon_wholly_in_the_longitude_gap_is_outside_grid():
    # Same 170°E-170°W grid: a polygon at 0-10°E touches none of its cells.
    lon = np.concatenate([np.arange(-179.5, -170.0, 1.0), np.arange(170.5, 180.0, 1.0)])
    g = make_grid(np.ones((2, 2, lon.size)), lat=[-0.5, 0.5], lon=lon, start="2000-01-01", freq="MS")
    t = table([0.5, 0.5, 0.5], [5.0, 175.0, 5.0], "2000-01-01", "2000-01-31",
              site_wkt=["POLYGON((0 0,10 0,10 1,0 1,0 0))", "POLYGON((174 0,176 0,176 1,174 1,174 0))", ""])
    out = attach(t, g, name="v", spatial="polygon")
    assert out["v_flags"].tolist() == ["outside_grid", "", "outside_grid"]
    assert np.isnan(out["v"][[0, 2]]).all() and out["v"][1] == 1.0


# -- a regional grid across the antimeridian: 170°E … 169°W, values row*100 + col ----
SEAM_LON = np.concatenate([np.arange(-179.5, -169.0, 1.0), np.arange(170.5, 180.0, 1.0)])
SEAM_LAT = np.arange(-4.5, 5.0, 1.0)
SEAM_V = (np.arange(SEAM_LAT.size)[:, None] * 100.0 + np.arange(SEAM_LON.size)[None, :])


def _seam_grid(values: np.ndarray = SEAM_V):
    return make_grid(np.repeat(values[None], 2, 0), lat=SEAM_LAT, lon=SEAM_LON, start="2000-01-01", freq="MS")


def test_seam_grid_cell_edges_keep_the_gap():
    # cells next to the gap end half the local step (0.5°) past their centre; the
    # columns at ±179.5° meet at ±180°; every cell is a 1°×1° cell (closed form area)
    from envlink.extract.spatial import GridGeometry

    g = GridGeometry(_seam_grid())
    assert_allclose(g.lon_east - g.lon_west, np.ones(SEAM_LON.size), rtol=0, atol=1e-12)
    assert_allclose(g.lon_west, SEAM_LON - 0.5, rtol=0, atol=1e-12)
    areas = g.cell_areas(np.arange(SEAM_LON.size) + 4 * SEAM_LON.size)  # row 4: -0.5°
    assert_allclose(areas, cell_area_km2(-1.0, 0.0, 1.0), rtol=1e-12)
    near, _ = g.nearest(np.array([0.2, 0.2, 0.2, 0.2]), np.array([-169.1, -168.9, 169.9, 170.1]))
    assert near.tolist()[0] == 5 * 21 + 10 and near.tolist()[1:3] == [-1, -1] and near[3] == 5 * 21 + 11


def test_seam_grid_bilinear_interpolates_across_180():
    # reference: scipy RegularGridInterpolator on the grid moved to 0..360 longitudes
    from scipy.interpolate import RegularGridInterpolator

    g = _seam_grid()
    lon360 = np.mod(SEAM_LON, 360.0)
    o = np.argsort(lon360)
    interp = RegularGridInterpolator((SEAM_LAT, lon360[o]), SEAM_V[:, o])
    slat, slon = np.array([0.2, 0.2, -3.7, 2.9]), np.array([179.9, -179.9, 179.1, -178.2])
    out = attach(table(slat, slon, "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    ref = interp(np.column_stack([slat, np.mod(slon, 360.0)]))
    assert_allclose(out["v"], ref, rtol=1e-12)
    # by hand: 100·4.7 + 0.6·20 + 0.4·0 (columns 179.5° = col 20 and -179.5° = col 0)
    assert_allclose(out["v"][:2], [482.0, 478.0], rtol=1e-12)
    # a site between the last centre of a run and the gap (-169.2°) stays on its column
    side = attach(table([0.5], [-169.2], "2000-01-01", "2000-01-31"), g, name="v", spatial="bilinear")
    assert_allclose(side["v"][0], SEAM_V[5, 10], rtol=1e-12)


def test_seam_grid_buffer_and_nearest_valid_reach_across_180():
    g = _seam_grid()
    t = table([0.2], [179.9], "2000-01-01", "2000-01-31")
    out = attach(t, g, name="v", spatial="buffer:120km")
    # brute force: every centre within 120 km by great-circle distance, spherical areas
    la, lo = np.meshgrid(SEAM_LAT, SEAM_LON, indexing="ij")
    m = great_circle_km(0.2, 179.9, la, lo) <= 120.0
    a = cell_area_km2(la - 0.5, la + 0.5, np.ones_like(la))
    assert_allclose(out["v"][0], (a[m] * SEAM_V[m]).sum() / a[m].sum(), rtol=1e-12)
    assert_allclose(out["v"][0], (400 + 420 + 500 + 520) / 4.0, rtol=1e-12)  # by hand: rows 4-5, ±179.5°
    # nearest-valid: the site's own column (179.5°) is masked; the nearest cell with
    # data is across ±180° at (0.5, -179.5), 44.5 km away
    v = SEAM_V.copy()
    v[:, 20] = np.nan
    nv = attach(table([0.4], [179.9], "2000-01-01", "2000-01-31"), _seam_grid(v), name="v",
                spatial="nearest-valid:100km")
    assert_allclose(nv["v"][0], SEAM_V[5, 0], rtol=1e-12)
    assert_allclose(nv["v_distance_km"][0], great_circle_km(0.4, 179.9, 0.5, -179.5), rtol=1e-12)
    assert nv["v_flags"][0] == f"nearest_valid_{round(float(great_circle_km(0.4, 179.9, 0.5, -179.5)))}km"


def test_seam_grid_polygon_across_180_and_partly_in_the_gap():
    g = _seam_grid()
    across = Polygon([(178.2, 0.1), (-178.8, 0.1), (-178.8, 0.9), (178.2, 0.9)])
    part = Polygon([(-169.9, 0.0), (-160.0, 0.0), (-160.0, 1.0), (-169.9, 1.0)])
    t = table([0.5, 0.5], [179.0, -169.0], "2000-01-01", "2000-01-31", site_wkt=[across.wkt, part.wkt])
    out = attach(t, g, name="v", spatial="polygon")
    # reference: shapely areas on a pyproj Lambert cylindrical equal-area projection
    # of the polygon moved to 0..360 longitudes, against the 1° cells of row 5 (lat 0..1)
    cea = pyproj.Transformer.from_crs("EPSG:4326", "+proj=cea +lon_0=180 +R=6371008.8", always_xy=True)
    p360 = shapely.segmentize(Polygon([(178.2, 0.1), (181.2, 0.1), (181.2, 0.9), (178.2, 0.9)]), 0.01)
    to = lambda geom: shapely.transform(geom, lambda xy: np.column_stack(cea.transform(xy[:, 0], xy[:, 1])))  # noqa: E731
    num = den = 0.0
    for col, c in enumerate(SEAM_LON):
        c360 = c % 360.0
        area = to(p360).intersection(to(shapely.box(c360 - 0.5, 0.0, c360 + 0.5, 1.0))).area
        num += area * SEAM_V[5, col]
        den += area
    assert_allclose(out["v"][0], num / den, rtol=1e-6)
    assert_allclose(out["v"][0], (0.8 * 519 + 520 + 500 + 0.2 * 501) / 3.0, rtol=1e-6)  # by hand
    # partly in the gap: only the -169.5° column, and the polygon (9.9 cells) is not
    # smaller than that cell
    assert out["v_flags"].tolist() == ["", ""]
    assert_allclose(out["v"][1], SEAM_V[5, 10], rtol=1e-12)


def test_seam_grid_from_a_file_in_0_360_bilinear(tmp_path):
    # the file stores 170.5 … 189.5°E, values row*100 + col; open_grid moves it to
    # [-180, 180) as two runs; bilinear across 180° by hand: 100·4.7 + 9.4 and + 9.6
    import pandas as pd
    import xarray as xr

    import envlink

    lon = np.arange(170.5, 190.0, 1.0)
    v = np.arange(10)[:, None] * 100.0 + np.arange(20)[None, :]
    ds = xr.Dataset(
        {"sst": (("time", "lat", "lon"), np.repeat(v[None], 2, 0), {"units": "degC"})},
        coords={"time": pd.date_range("2000-01-01", periods=2, freq="MS"),
                "lat": ("lat", SEAM_LAT, {"units": "degrees_north"}),
                "lon": ("lon", lon, {"units": "degrees_east"})},
    )
    ds.to_netcdf(tmp_path / "seam.nc")
    g = envlink.open_grid(tmp_path / "seam.nc")
    t = table([0.2, 0.2, 0.0], [179.9, -179.9, 0.0], "2000-01-01", "2000-01-31")
    out = attach(t, g, name="v", spatial="bilinear")
    assert_allclose(out["v"][:2], [479.4, 479.6], rtol=1e-12)
    assert out["v_flags"].tolist() == ["", "", "outside_grid"]


def test_buffer_cells_match_brute_force_great_circle_at_high_latitude():
    # every centre within R by great-circle distance (brute force over all cells),
    # including sites near 80°N where the longitude reach is widest, on a seam grid
    from envlink.extract.spatial import GridGeometry

    lat = np.arange(60.25, 90.0, 0.5)
    lon = np.concatenate([np.arange(-179.75, -150.0, 0.5), np.arange(150.25, 180.0, 0.5)])
    geom = GridGeometry(make_grid(np.zeros((1, lat.size, lon.size)), lat=lat, lon=lon))
    rng = np.random.default_rng(21)
    slat = rng.uniform(61.0, 89.0, 40)
    slon = np.mod(rng.uniform(160.0, 200.0, 40) + 180.0, 360.0) - 180.0
    ptr, cells, dist = geom.within(slat, slon, 150.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    for k in range(slat.size):
        d = great_circle_km(slat[k], slon[k], la.ravel(), lo.ravel())
        ref = np.nonzero(d <= 150.0)[0]
        got = cells[ptr[k] : ptr[k + 1]]
        assert sorted(got.tolist()) == ref.tolist(), k
        assert_allclose(dist[ptr[k] : ptr[k + 1]], np.sort(d[ref]), rtol=1e-12)
