"""Tests of envlink.geo against closed forms, pyproj.Geod and shapely on pyproj projections."""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest
import shapely
from numpy.testing import assert_allclose
from reference import geodesy as ref
from shapely.geometry import Polygon, box

from envlink import geo

# A sphere of the IUGG mean radius in pyproj (GeographicLib solves it exactly).
SPHERE = pyproj.Geod(a=ref.IUGG_MEAN_RADIUS_KM * 1000.0, b=ref.IUGG_MEAN_RADIUS_KM * 1000.0)
WGS84 = pyproj.Geod(ellps="WGS84")


def test_radius_is_iugg_mean():
    # Moritz (2000), GRS80 R1 (tests/reference/geodesy.py)
    assert geo.EARTH_RADIUS_KM == ref.IUGG_MEAN_RADIUS_KM


def test_one_degree_of_arc():
    # closed form R·π/180 (tests/reference/geodesy.py)
    assert_allclose(geo.great_circle_km(0.0, 0.0, 0.0, 1.0), ref.ONE_DEGREE_ARC_KM, rtol=1e-12)
    assert_allclose(geo.great_circle_km(10.0, 20.0, 11.0, 20.0), ref.ONE_DEGREE_ARC_KM, rtol=1e-12)


def test_distances_against_pyproj_sphere_and_wgs84():
    rng = np.random.default_rng(3)
    lat1, lat2 = rng.uniform(-89, 89, 500), rng.uniform(-89, 89, 500)
    lon1, lon2 = rng.uniform(-180, 180, 500), rng.uniform(-180, 180, 500)
    ours = geo.great_circle_km(lat1, lon1, lat2, lon2)
    # pyproj.Geod on a sphere of radius R (GeographicLib, exact): same quantity
    _, _, d_sphere = SPHERE.inv(lon1, lat1, lon2, lat2)
    assert_allclose(ours, np.asarray(d_sphere) / 1000.0, rtol=1e-9, atol=1e-6)
    # pyproj.Geod on WGS84: ellipsoidal geodesics differ from the sphere by < ~0.5 %
    _, _, d_ell = WGS84.inv(lon1, lat1, lon2, lat2)
    assert_allclose(ours, np.asarray(d_ell) / 1000.0, rtol=ref.SPHERE_VS_ELLIPSOID_RTOL)


def test_short_distances_stable_and_chords():
    # haversine is exact for tiny separations: 1e-6 degree of arc (closed form R·θ)
    d = geo.great_circle_km(45.0, 7.0, 45.0 + 1e-6, 7.0)
    assert_allclose(d, ref.ONE_DEGREE_ARC_KM * 1e-6, rtol=1e-6)
    km = np.array([0.0, 1.0, 25.0, 1000.0, 20000.0])
    assert_allclose(geo.chord_to_km(geo.km_to_chord(km)), km, rtol=1e-12, atol=1e-9)


def test_kdtree_nearest_matches_brute_force():
    rng = np.random.default_rng(4)
    plat, plon = rng.uniform(-80, 80, 2000), rng.uniform(-180, 180, 2000)
    qlat, qlon = rng.uniform(-80, 80, 200), rng.uniform(-180, 180, 200)
    tree = geo.build_kdtree(plat, plon)
    chord, idx = tree.query(geo.unit_vectors(qlat, qlon))
    brute = geo.great_circle_km(qlat[:, None], qlon[:, None], plat[None, :], plon[None, :])
    assert (idx == brute.argmin(axis=1)).all()
    assert_allclose(geo.chord_to_km(chord), brute.min(axis=1), rtol=1e-9, atol=1e-9)


def test_cell_area_closed_form_and_equator_value():
    # R²Δλ(sin φ₂ − sin φ₁) for a 1°×1° equator cell (tests/reference/geodesy.py)
    assert_allclose(geo.cell_area_km2(0.0, 1.0, 1.0), ref.CELL_1DEG_EQUATOR_KM2, rtol=1e-12)
    assert round(float(geo.cell_area_km2(0.0, 1.0, 1.0))) == 12364  # the rounded figure
    # the whole sphere: 4πR²
    assert_allclose(geo.cell_area_km2(-90.0, 90.0, 360.0), 4 * math.pi * ref.IUGG_MEAN_RADIUS_KM**2, rtol=1e-12)


@pytest.mark.parametrize("lat0", [0.0, 30.0, 60.0, 85.0])
def test_cell_area_against_pyproj_geod(lat0):
    # pyproj.Geod.polygon_area_perimeter on the sphere; the cell's parallels are
    # densified (1000 points) because Geod joins vertices by geodesics
    n = 1000
    lons = np.linspace(10.0, 12.0, n)
    lat1 = lat0 + 0.5
    ring_lon = np.concatenate([lons, lons[::-1]])
    ring_lat = np.concatenate([np.full(n, lat0), np.full(n, lat1)])
    area, _ = SPHERE.polygon_area_perimeter(ring_lon, ring_lat)
    assert_allclose(geo.cell_area_km2(lat0, lat1, 2.0), abs(area) / 1e6, rtol=1e-5)


def test_cell_edges():
    assert_allclose(geo.cell_edges([-0.5, 0.5, 1.5]), [-1.0, 0.0, 1.0, 2.0], rtol=0, atol=1e-15)


def _laea_fraction(poly, cell, lon0, lat0):
    """shapely intersection area share on a Lambert azimuthal equal-area projection."""
    proj = pyproj.Transformer.from_crs(
        "EPSG:4326", pyproj.CRS.from_proj4(f"+proj=laea +lat_0={lat0} +lon_0={lon0} +R=6371008.8"), always_xy=True
    )

    def to(g):
        g = shapely.segmentize(g, 0.01)
        return shapely.transform(g, lambda xy: np.column_stack(proj.transform(xy[:, 0], xy[:, 1])))

    return to(poly).intersection(to(cell)).area / to(cell).area, to(poly).intersection(to(cell)).area / 1e6


def test_polygon_fractions_against_shapely_equal_area_projection():
    # an irregular polygon over 0.25° cells near 40°N; reference: shapely on a
    # pyproj LAEA projection (equal-area) of the lon/lat geometry densified to 0.01°
    poly = Polygon([(10.05, 40.02), (10.9, 40.1), (10.7, 40.8), (10.2, 40.6)])
    lat_e = np.arange(39.75, 41.01, 0.25)
    lon_e = np.arange(9.75, 11.26, 0.25)
    iy, ix, area, frac = geo.polygon_cell_overlaps(poly, lat_e, lon_e)
    assert iy.size > 6
    for j, i, a, f in zip(iy, ix, area, frac, strict=True):
        ref_f, ref_a = _laea_fraction(poly, box(lon_e[i], lat_e[j], lon_e[i + 1], lat_e[j + 1]), 10.5, 40.4)
        assert_allclose(f, ref_f, rtol=2e-3, atol=2e-4)
        assert_allclose(a, ref_a, rtol=2e-3, atol=0.2)
    # areas add up to the polygon's spherical area (pyproj.Geod on the sphere, densified)
    dense = shapely.segmentize(poly, 0.001)
    x, y = dense.exterior.coords.xy
    total, _ = SPHERE.polygon_area_perimeter(np.asarray(x), np.asarray(y))
    assert_allclose(area.sum(), abs(total) / 1e6, rtol=1e-4)


def test_polygon_crossing_antimeridian():
    # a box from 179.5°E to 179.5°W, written with lon in [-180, 180): area splits evenly
    poly = Polygon([(179.5, 0.0), (-179.5, 0.0), (-179.5, 1.0), (179.5, 1.0)])
    lat_e = np.array([0.0, 1.0])
    lon_e = np.arange(-180.0, 180.1, 1.0)
    iy, ix, area, frac = geo.polygon_cell_overlaps(poly, lat_e, lon_e, wrap=True)
    assert sorted(lon_e[ix].tolist()) == [-180.0, 179.0]
    assert_allclose(frac, [0.5, 0.5], rtol=1e-9)
    # total = one 1°×1° equator cell (tests/reference/geodesy.py)
    assert_allclose(area.sum(), ref.CELL_1DEG_EQUATOR_KM2, rtol=1e-9)


def test_polygon_smaller_than_cell_keeps_the_cell():
    poly = box(0.4, 0.4, 0.45, 0.45)
    iy, ix, area, frac = geo.polygon_cell_overlaps(poly, [0.0, 1.0], [0.0, 1.0])
    assert iy.tolist() == [0] and ix.tolist() == [0]
    # spherical area of the tiny box by the closed form
    assert_allclose(area, geo.cell_area_km2(0.4, 0.45, 0.05), rtol=1e-9)


def test_polygon_overlaps_with_column_bounds_and_a_gap():
    # columns 170..180 and 180..190 given as (west, east) bounds in a frame past 180°,
    # with a gap 171..189 between them; the polygon is written in [-180, 180)
    poly = Polygon([(170.5, 0.0), (-170.5, 0.0), (-170.5, 1.0), (170.5, 1.0)])
    iy, ix, area, frac = geo.polygon_cell_overlaps(poly, [0.0, 1.0], [[170.0, 171.0], [189.0, 190.0]], wrap=True)
    assert ix.tolist() == [0, 1]
    assert_allclose(frac, [0.5, 0.5], rtol=1e-9)
    # each part is half a 1°×1° equator cell (tests/reference/geodesy.py)
    assert_allclose(area, [ref.CELL_1DEG_EQUATOR_KM2 / 2] * 2, rtol=1e-9)
    # written 360° west of the frame, the same cells are found
    west = Polygon([(-189.5, 0.0), (-170.5, 0.0), (-170.5, 1.0), (-189.5, 1.0)])
    assert geo.polygon_cell_overlaps(west, [0.0, 1.0], [[170.0, 171.0], [189.0, 190.0]], wrap=True)[1].tolist() == [0, 1]


def test_polygon_area_against_pyproj_geod_sphere():
    # reference: pyproj.Geod on the same sphere, edges densified to 0.001°
    poly = Polygon([(179.2, -3.0), (-178.4, -2.6), (-178.9, 1.5), (178.8, 0.7)])
    p360 = shapely.transform(poly, lambda xy: np.column_stack([np.mod(xy[:, 0], 360.0), xy[:, 1]]))
    x, y = shapely.segmentize(p360, 0.001).exterior.coords.xy
    total, _ = SPHERE.polygon_area_perimeter(np.asarray(x), np.asarray(y))
    assert_allclose(geo.polygon_area_km2(poly, 0.01), abs(total) / 1e6, rtol=1e-4)
