"""CurvilinearIndex: KD-tree nearest cells checked against a brute-force haversine search."""

from __future__ import annotations

import numpy as np
import xarray as xr
from numpy.testing import assert_allclose, assert_array_equal

from envlink.grids import CurvilinearIndex
from envlink.grids.curvilinear import EARTH_RADIUS_KM


def _haversine_km(lat1, lon1, lat2, lon2):
    # Haversine formula (Sinnott 1984, Sky & Telescope 68:159), sphere of radius R.
    p1, p2 = np.radians(lat1), np.radians(lat2)
    dphi, dlam = p2 - p1, np.radians(lon2 - lon1)
    a = np.sin(dphi / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dlam / 2) ** 2
    return 2 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(a))


def test_nearest_matches_brute_force_across_the_antimeridian():
    rng = np.random.default_rng(4)
    ny, nx = 20, 30
    jj, ii = np.meshgrid(np.arange(ny), np.arange(nx), indexing="ij")
    lat = -30 + 2.0 * jj + 0.3 * np.sin(ii / 3.0)  # a skewed ocean-model-like grid
    lon = ((160 + 1.5 * ii + 0.2 * jj + 180) % 360) - 180  # wraps across 180
    lat[0, 0] = np.nan  # a cell without coordinates is skipped
    g = xr.DataArray(np.zeros((ny, nx)), dims=("y", "x"),
                     coords={"lat": (("y", "x"), lat), "lon": (("y", "x"), lon)})
    sites_lat = rng.uniform(-25, 5, 50)
    sites_lon = ((rng.uniform(165, 200, 50) + 180) % 360) - 180
    iy, ix, km = CurvilinearIndex(g).query(sites_lat, sites_lon)
    for k in range(50):
        d = _haversine_km(sites_lat[k], sites_lon[k], lat, lon)
        d[~np.isfinite(d)] = np.inf
        by, bx = np.unravel_index(np.argmin(d), d.shape)
        assert (iy[k], ix[k]) == (by, bx)
        assert_allclose(km[k], d[by, bx], rtol=1e-9, atol=1e-9)
    assert not np.any((iy == 0) & (ix == 0))


def test_exact_cell_gives_zero_distance():
    lat = np.array([[10.0, 10.0], [11.0, 11.0]])
    lon = np.array([[179.0, -179.0], [179.0, -179.0]])
    g = xr.DataArray(np.zeros((2, 2)), dims=("y", "x"),
                     coords={"lat": (("y", "x"), lat), "lon": (("y", "x"), lon)})
    iy, ix, km = CurvilinearIndex(g).query([11.0], [-179.0])
    assert_array_equal([iy[0], ix[0]], [1, 1])
    assert_allclose(km, [0.0], rtol=0.0, atol=1e-6)
