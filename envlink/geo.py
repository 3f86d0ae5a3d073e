"""Pure geodesy helpers on the IUGG mean sphere: distances, KD-trees, cell areas, overlaps.

Every function here works on NumPy arrays of degrees and returns kilometres or square
kilometres. Distances are great-circle distances on a sphere of radius
:data:`EARTH_RADIUS_KM` (IUGG mean radius R1 = 6371.0088 km); they differ from
ellipsoidal (WGS84) geodesics by at most about 0.5 %. Cell areas use the exact
spherical formula ``R² Δλ (sin φ₂ − sin φ₁)``.

Polygon/cell overlap fractions are computed in the Lambert cylindrical equal-area
plane ``(λ, sin φ)``, where every lat/lon cell is a rectangle whose area (times R²)
is its exact spherical area; polygon edges are taken as straight lines in lon/lat
(densified before the mapping).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from envlink.core.earth import EARTH_RADIUS_KM

__all__ = [
    "EARTH_RADIUS_KM",
    "unit_vectors",
    "great_circle_km",
    "chord_to_km",
    "km_to_chord",
    "build_kdtree",
    "cell_edges",
    "cell_area_km2",
    "unwrap_polygon",
    "polygon_cell_overlaps",
    "polygon_area_km2",
]

def unit_vectors(lat: ArrayLike, lon: ArrayLike) -> np.ndarray:
    """3-D unit vectors of points given in degrees, shape ``(..., 3)``, float64.

    Examples
    --------
    >>> unit_vectors([0.0], [90.0]).round(12).tolist()
    [[0.0, 1.0, 0.0]]
    """
    phi = np.radians(np.asarray(lat, dtype=np.float64))
    lam = np.radians(np.asarray(lon, dtype=np.float64))
    cphi = np.cos(phi)
    return np.stack([cphi * np.cos(lam), cphi * np.sin(lam), np.sin(phi)], axis=-1)


def great_circle_km(lat1: ArrayLike, lon1: ArrayLike, lat2: ArrayLike, lon2: ArrayLike) -> np.ndarray:
    """Great-circle distance in km (haversine form, stable for short distances).

    Examples
    --------
    >>> round(float(great_circle_km(0, 0, 0, 1)), 4)  # one degree of the equator
    111.1951
    """
    p1 = np.radians(np.asarray(lat1, dtype=np.float64))
    p2 = np.radians(np.asarray(lat2, dtype=np.float64))
    dl = np.radians(np.asarray(lon2, dtype=np.float64) - np.asarray(lon1, dtype=np.float64))
    h = np.sin((p2 - p1) / 2.0) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2.0) ** 2
    return 2.0 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(h, 0.0, 1.0)))


def chord_to_km(chord: ArrayLike) -> np.ndarray:
    """Great-circle distance in km for a chord length between unit vectors."""
    c = np.clip(np.asarray(chord, dtype=np.float64), 0.0, 2.0)
    return 2.0 * EARTH_RADIUS_KM * np.arcsin(c / 2.0)


def km_to_chord(km: ArrayLike) -> np.ndarray:
    """Chord length between unit vectors for a great-circle distance in km."""
    ang = np.clip(np.asarray(km, dtype=np.float64) / EARTH_RADIUS_KM, 0.0, np.pi)
    return 2.0 * np.sin(ang / 2.0)


def build_kdtree(lat: ArrayLike, lon: ArrayLike):  # noqa: ANN201 - scipy type
    """A :class:`scipy.spatial.cKDTree` over the unit vectors of the given points.

    Query it with :func:`unit_vectors` of the sites; convert the returned chord
    lengths with :func:`chord_to_km`.

    Examples
    --------
    >>> tree = build_kdtree([0.0, 10.0], [0.0, 0.0])
    >>> d, i = tree.query(unit_vectors([9.0], [0.0]))
    >>> int(i[0]), round(float(chord_to_km(d)[0]), 1)
    (1, 111.2)
    """
    from scipy.spatial import cKDTree

    xyz = unit_vectors(np.ravel(lat), np.ravel(lon))
    return cKDTree(xyz)


def cell_edges(centres: ArrayLike) -> np.ndarray:
    """Cell edges (n + 1) of ascending 1-D cell centres: midpoints, ends mirrored.

    Examples
    --------
    >>> cell_edges([0.5, 1.5, 2.5]).tolist()
    [0.0, 1.0, 2.0, 3.0]
    """
    c = np.asarray(centres, dtype=np.float64)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = (c[1:] + c[:-1]) / 2.0
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def cell_area_km2(lat_south: ArrayLike, lat_north: ArrayLike, dlon_deg: ArrayLike) -> np.ndarray:
    """Exact spherical area of lat/lon cells: ``R² Δλ (sin φ₂ − sin φ₁)`` in km².

    Examples
    --------
    >>> round(float(cell_area_km2(0.0, 1.0, 1.0)), 1)  # 1°×1° at the equator
    12363.7
    """
    s = np.radians(np.clip(np.asarray(lat_south, dtype=np.float64), -90.0, 90.0))
    n = np.radians(np.clip(np.asarray(lat_north, dtype=np.float64), -90.0, 90.0))
    dl = np.radians(np.asarray(dlon_deg, dtype=np.float64))
    return EARTH_RADIUS_KM**2 * dl * (np.sin(n) - np.sin(s))


def unwrap_polygon(geom):  # noqa: ANN001, ANN201 - shapely geometry
    """Return the polygon with longitudes made continuous across the antimeridian.

    A polygon whose longitudes span more than 180° is taken to cross the
    antimeridian: its negative longitudes are shifted by +360°, so the result lies in
    [0, 360) around 180°. Other polygons are returned unchanged.
    """
    import shapely

    minx, _, maxx, _ = geom.bounds
    if maxx - minx <= 180.0:
        return geom
    return shapely.transform(
        geom, lambda xy: np.column_stack([np.where(xy[:, 0] < 0, xy[:, 0] + 360.0, xy[:, 0]), xy[:, 1]])
    )


def _to_equal_area(geom, step_deg: float):  # noqa: ANN001, ANN202
    import shapely

    dense = shapely.segmentize(geom, max_segment_length=step_deg)
    return shapely.transform(
        dense, lambda xy: np.column_stack([np.radians(xy[:, 0]), np.sin(np.radians(xy[:, 1]))])
    )


def polygon_area_km2(geom, step_deg: float = 0.05) -> float:  # noqa: ANN001 - shapely geometry
    """Spherical area (km²) of a lon/lat polygon, edges straight in lon/lat.

    The polygon is unwrapped across the antimeridian (:func:`unwrap_polygon`),
    densified to ``step_deg`` and measured in the Lambert cylindrical equal-area plane.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> round(polygon_area_km2(box(0.0, 0.0, 1.0, 1.0)), 1)  # = cell_area_km2(0, 1, 1)
    12363.7
    """
    return float(_to_equal_area(unwrap_polygon(geom), step_deg).area * EARTH_RADIUS_KM**2)


def polygon_cell_overlaps(
    geom,  # noqa: ANN001 - shapely geometry in lon/lat degrees
    lat_edges: ArrayLike,
    lon_edges: ArrayLike,
    *,
    wrap: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cells of a regular lat/lon grid that a polygon overlaps, with exact area shares.

    Parameters
    ----------
    geom : shapely Polygon or MultiPolygon
        In lon/lat degrees; may cross the antimeridian (see :func:`unwrap_polygon`).
    lat_edges : array-like
        Ascending cell edges (n + 1) in degrees.
    lon_edges : array-like
        Ascending shared cell edges (n + 1), or per-column ``(west, east)`` bounds of
        shape (n, 2), ascending, for columns with gaps between them.
    wrap : bool
        Longitudes are periodic: the cells are also tried 360° east and west, so a
        polygon written in any frame (e.g. 178°…182° or −178°…−175°) meets them.

    Returns
    -------
    iy, ix : ndarray of int
        Row and column of each overlapped cell.
    area_km2 : ndarray
        Spherical area of the part of the cell inside the polygon.
    fraction : ndarray
        That area divided by the cell's spherical area.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> iy, ix, a, f = polygon_cell_overlaps(box(0.0, 0.0, 0.5, 1.0), [0, 1], [0, 1])
    >>> iy.tolist(), ix.tolist(), f.round(6).tolist()
    ([0], [0], [0.5])
    >>> iy, ix, a, f = polygon_cell_overlaps(box(0.5, 0.0, 2.5, 1.0), [0, 1], [[0, 1], [2, 3]])
    >>> ix.tolist(), f.round(6).tolist()  # the gap between 1° and 2° holds no cell
    ([0, 1], [0.5, 0.5])
    """
    import shapely

    lat_e = np.asarray(lat_edges, dtype=np.float64)
    lon_b = np.asarray(lon_edges, dtype=np.float64)
    if lon_b.ndim == 2:
        west, east = lon_b[:, 0], lon_b[:, 1]
    else:
        west, east = lon_b[:-1], lon_b[1:]
    ncol = west.size
    geom = unwrap_polygon(geom)
    step = float(min(np.min(np.diff(lat_e)), np.min(east - west))) / 4.0
    ea = _to_equal_area(geom, step)
    minx, miny, maxx, maxy = geom.bounds
    shifts = [-360.0, 0.0, 360.0] if wrap else [0.0]
    out_y, out_x, out_a, out_f = [], [], [], []
    y0 = max(int(np.searchsorted(lat_e, miny, side="right")) - 1, 0)
    y1 = min(int(np.searchsorted(lat_e, maxy, side="left")), lat_e.size - 1)
    for shift in shifts:
        we, ee = west + shift, east + shift
        cols = np.nonzero((ee > minx) & (we < maxx))[0]
        if cols.size == 0 or y1 <= y0:
            continue
        gy, gx = np.meshgrid(np.arange(y0, y1), cols, indexing="ij")
        iy, ix = gy.ravel(), gx.ravel()
        s, n = np.sin(np.radians(lat_e[iy])), np.sin(np.radians(lat_e[iy + 1]))
        w, e = np.radians(we[ix]), np.radians(ee[ix])
        boxes = shapely.box(w, s, e, n)
        inter = shapely.area(shapely.intersection(boxes, ea))
        keep = inter > 0.0
        cell = (e - w) * (n - s)
        out_y.append(iy[keep])
        out_x.append(ix[keep])
        out_a.append(inter[keep] * EARTH_RADIUS_KM**2)
        out_f.append(inter[keep] / cell[keep])
    if not out_y:
        empty = np.array([], dtype=np.int64)
        return empty, empty, np.array([]), np.array([])
    iy_a, ix_a = np.concatenate(out_y), np.concatenate(out_x)
    a_a, f_a = np.concatenate(out_a), np.concatenate(out_f)
    # the same cell reached in two frames (a polygon wider than the grid) adds up
    key = iy_a * ncol + ix_a
    uniq, inv = np.unique(key, return_inverse=True)
    area = np.bincount(inv, weights=a_a)
    frac = np.bincount(inv, weights=f_a)
    return uniq // ncol, uniq % ncol, area, frac
