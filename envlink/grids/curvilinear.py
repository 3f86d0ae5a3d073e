"""Nearest cells of curvilinear grids (2-D latitude/longitude) through a KD-tree on unit vectors.

Ocean-model grids have no 1-D axes to search, so their cell centres are put in a
KD-tree as 3-D unit vectors; the nearest vector by chord length is the nearest cell
by great-circle distance, and the chord ``c`` converts to that distance exactly as
``2 R asin(c / 2)`` on a sphere of IUGG mean radius R = 6371.0088 km.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from envlink.errors import InputError
from envlink.geo import EARTH_RADIUS_KM, build_kdtree, chord_to_km, unit_vectors

__all__ = ["CurvilinearIndex", "EARTH_RADIUS_KM"]


class CurvilinearIndex:
    """A KD-tree over the cells of a curvilinear grid (dims ``y``, ``x``; 2-D ``lat``/``lon``).

    Cells with a missing coordinate are left out. Build once, query many sites.

    Parameters
    ----------
    grid : xarray.DataArray
        A normalised curvilinear grid (or any array with 2-D ``lat``/``lon`` coords).

    Examples
    --------
    >>> lat = np.array([[0.0, 0.0], [1.0, 1.0]])
    >>> lon = np.array([[10.0, 11.0], [10.0, 11.0]])
    >>> g = xr.DataArray(np.zeros((2, 2)), dims=("y", "x"),
    ...                  coords={"lat": (("y", "x"), lat), "lon": (("y", "x"), lon)})
    >>> iy, ix, km = CurvilinearIndex(g).query([0.9], [10.2])
    >>> int(iy[0]), int(ix[0]), round(float(km[0]), 1)
    (1, 0, 24.9)
    """

    def __init__(self, grid: xr.DataArray) -> None:
        if "lat" not in grid.coords or grid["lat"].ndim != 2:
            raise InputError("CurvilinearIndex needs a grid with 2-D 'lat' and 'lon' coordinates.")
        lat = np.asarray(grid["lat"].values, dtype=np.float64)
        lon = np.asarray(grid["lon"].values, dtype=np.float64)
        self.shape = lat.shape
        ok = np.isfinite(lat) & np.isfinite(lon)
        self._flat = np.flatnonzero(ok.ravel())
        self._tree = build_kdtree(lat.ravel()[self._flat], lon.ravel()[self._flat])

    def query(
        self, lat: Sequence[float] | np.ndarray, lon: Sequence[float] | np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Nearest cell of each site: row index, column index and great-circle distance (km)."""
        chord, idx = self._tree.query(unit_vectors(np.ravel(lat), np.ravel(lon)))
        flat = self._flat[np.asarray(idx)]
        iy, ix = np.unravel_index(flat, self.shape)
        return np.asarray(iy), np.asarray(ix), chord_to_km(chord)
