"""Longitude gaps of regional grids across ±180°: the longitudes such a grid does not cover.

A site (or every vertex of a polygon) in a gap is outside the grid, whatever rule
answers it; see :func:`in_lon_gap`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from envlink.extract.spatial import GridGeometry

__all__ = ["in_lon_gap", "lon_gaps"]


def in_lon_gap(geom: GridGeometry, lon: np.ndarray) -> np.ndarray:
    """Sites in a longitude gap of a regional lat/lon grid (one crossing the antimeridian).

    A regional grid from 170°E to 170°W is stored, in [-180, 180), as -179.5 … -170.5
    then 170.5 … 179.5: its centres jump across the longitudes it does not cover. A
    site in that jump (e.g. at 0°) is beyond the grid's edges, never in the cells on
    either side of it. Only grids whose centres run on across ±180° are looked at
    (so stretched regional grids are left alone); the jump is a spacing over 1.5
    times the median, and the covered part ends half a (neighbouring) step past
    each centre.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.zeros((1, 1, 4)), lat=[0.5], lon=[-179.5, -178.5, 178.5, 179.5])
    >>> from envlink.extract.spatial import GridGeometry
    >>> in_lon_gap(GridGeometry(g), np.array([179.9, -178.1, 0.0, 177.5])).tolist()
    [False, False, True, True]
    """
    out = np.zeros(lon.shape, dtype=bool)
    for left, right in lon_gaps(geom):
        out |= (lon > left + 1e-9) & (lon < right - 1e-9)
    return out


def lon_gaps(geom: GridGeometry) -> list[tuple[float, float]]:
    """The uncovered longitude intervals of a regional grid across ±180° (see above)."""
    if geom.kind != "regular" or geom.is_global or geom.lon.size < 3:
        return []
    c = np.asarray(geom.lon, dtype=np.float64)
    d = np.diff(c)
    step = float(np.median(d))
    if c[0] + 360.0 - c[-1] > 1.5 * step:  # does not run on across ±180°: no such gap
        return []
    gaps = []
    for k in np.nonzero(d > 1.5 * step)[0]:
        left = c[k] + 0.5 * (d[k - 1] if k > 0 else step)
        right = c[k + 1] - 0.5 * (d[k + 1] if k + 1 < d.size else step)
        gaps.append((float(left), float(right)))
    return gaps
