"""Spatial rules: which grid cells (and weights) answer a site.

:class:`GridGeometry` describes the horizontal layout of a normalised grid (regular
lat/lon, curvilinear with 2-D lat/lon, or projected x/y with a CRS) and finds cells
for sites, in float64:

- :meth:`GridGeometry.nearest`: the cell containing the site (regular and projected
  grids, by cell edges) or the nearest centre (curvilinear, KD-tree on unit vectors);
  sites outside the grid get ``-1``, never an edge cell.
- :meth:`GridGeometry.within`: every cell centre within a distance, sorted by distance
  (``nearest-valid`` candidates and ``buffer``).
- :func:`bilinear_cells`: the four neighbours and weights (regular grids; wraps
  across the antimeridian on global grids and on regional grids that cross it).
- :func:`polygon_cells`: cells a polygon overlaps, weighted by the spherical area
  inside the polygon.

Longitudes of a regular grid are handled in its *frame*: the columns in ascending
order of longitude, unwrapped so that a regional grid crossing the antimeridian
(stored in [-180, 180) as -179.5 … -170.5 then 170.5 … 179.5) reads 170.5 … 189.5.
Its cells are contiguous across ±180°, and the longitudes it does not cover stay a
gap: a cell next to a gap ends half its neighbour's step past its centre, never at
the midpoint across the gap.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from envlink.core.earth import EARTH_RADIUS_KM
from envlink.errors import InputError
from envlink.geo import (
    build_kdtree,
    cell_area_km2,
    cell_edges,
    great_circle_km,
    km_to_chord,
    polygon_area_km2,
    polygon_cell_overlaps,
    unit_vectors,
)


def _cat(xs: list[np.ndarray], dt: type) -> np.ndarray:
    return np.concatenate(xs).astype(dt) if xs else np.array([], dtype=dt)


__all__ = ["GridGeometry", "bilinear_cells", "polygon_cells"]


def _locate_1d(edges: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Index of the cell containing x (ascending edges), -1 outside; float64 ties go up."""
    i = np.searchsorted(edges, x, side="right") - 1
    i = np.where(x == edges[-1], edges.size - 2, i)  # the last edge belongs to the last cell
    return np.where((x < edges[0]) | (x > edges[-1]) | ~np.isfinite(x), -1, i)


class GridGeometry:
    """Horizontal layout of a normalised grid (see :mod:`envlink.testing`).

    Parameters
    ----------
    grid : xarray.DataArray
        A normalised grid; only its coordinates and attributes are read.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = GridGeometry(make_grid(lat=[0.5, 1.5], lon=[10.5, 11.5], periods=1, seed=0))
    >>> g.kind, g.shape, g.nearest(np.array([1.2]), np.array([10.9]))[0].tolist()
    ('regular', (2, 2), [2])
    """

    def __init__(self, grid: xr.DataArray) -> None:
        dims = tuple(grid.dims)
        if len(dims) != 3 or dims[0] != "time":
            raise InputError(
                f"attach needs a normalised grid with dims (time, lat, lon) or (time, y, x); got {dims}. "
                "Open files with envlink.open_grid."
            )
        self.dims = dims[1:]
        self.shape = (int(grid.sizes[dims[1]]), int(grid.sizes[dims[2]]))
        lat, lon = grid.coords.get("lat"), grid.coords.get("lon")
        self._tree = None
        if self.dims == ("lat", "lon"):
            self.kind = "regular"
            self.lat = np.asarray(grid["lat"].values, dtype=np.float64)
            self.lon = np.asarray(grid["lon"].values, dtype=np.float64)
            self.lat_edges = cell_edges(self.lat)
            step = float(np.median(np.diff(self.lon))) if self.lon.size > 1 else 1.0  # one column: 1° wide (cell_edges)
            self.is_global = bool(grid.attrs.get("envlink_global", self.lon.size * step >= 360.0 - 1e-6))
            self._lon_frame()
        elif lat is not None and lon is not None and lat.ndim == 2:
            self.kind = "curvilinear"
            self.lat2 = np.asarray(lat.values, dtype=np.float64)
            self.lon2 = np.asarray(lon.values, dtype=np.float64)
            self.is_global = False
        elif "crs_wkt" in grid.attrs and "x" in grid.coords and "y" in grid.coords:
            import pyproj

            self.kind = "projected"
            crs = pyproj.CRS.from_wkt(grid.attrs["crs_wkt"])
            self._fwd = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
            self._inv = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
            self.x = np.asarray(grid["x"].values, dtype=np.float64)
            self.y = np.asarray(grid["y"].values, dtype=np.float64)
            self._ydesc = self.y.size > 1 and self.y[1] < self.y[0]
            self.x_edges = cell_edges(self.x)
            self.y_edges = cell_edges(self.y[::-1] if self._ydesc else self.y)
            self.is_global = False
        else:
            raise InputError(
                "attach cannot read the grid's horizontal layout: expected 1-D lat/lon, 2-D lat/lon "
                "coordinates, or 1-D x/y with attrs['crs_wkt']."
            )

    def _lon_frame(self) -> None:
        """Columns in the unwrapped frame and their west / east edges (see the module)."""
        c = self.lon
        n = c.size
        perm = np.arange(n)
        u = c.copy()
        d = np.diff(c)
        step = float(np.median(d)) if n > 1 else 1.0
        gaps = np.zeros(max(n - 1, 0), dtype=bool)
        if not self.is_global and n >= 3 and c[0] + 360.0 - c[-1] <= 1.5 * step and np.any(d > 1.5 * step):
            # a regional grid whose centres run on across ±180°: the frame starts after
            # the widest jump, the columns west of it move 360° east
            k = int(np.argmax(d))
            perm = np.concatenate([np.arange(k + 1, n), np.arange(k + 1)])
            u = np.concatenate([c[k + 1 :], c[: k + 1] + 360.0])
            gaps = np.diff(u) > 1.5 * step
        edges = cell_edges(u)
        west, east = edges[:-1].copy(), edges[1:].copy()
        ud = np.diff(u)
        for j in np.nonzero(gaps)[0]:  # the cells on each side of a gap keep their local step
            east[j] = u[j] + 0.5 * (ud[j - 1] if j > 0 else step)
            west[j + 1] = u[j + 1] - 0.5 * (ud[j + 1] if j + 1 < ud.size else step)
        self._perm, self._ulon, self._uwest, self._ueast, self._ugap = perm, u, west, east, gaps
        back = np.empty(n, dtype=np.int64)
        back[perm] = np.arange(n)
        w_phys, e_phys = west[back], east[back]
        shift = np.where(u[back] > c + 180.0, 360.0, 0.0)
        #: per-column west / east edges, degrees, in the grid's own longitudes
        self.lon_west, self.lon_east = w_phys - shift, e_phys - shift
        #: (n + 1) edges: the west edges then the last east edge (shared edges when the
        #: columns are contiguous; use ``lon_west`` / ``lon_east`` across a gap)
        self.lon_edges = np.concatenate([self.lon_west, self.lon_east[-1:]])

    def _frame_pos(self, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Longitudes moved into the frame and the frame column holding each (-1 outside)."""
        w0 = self._uwest[0]
        fin = np.isfinite(lon)
        x = w0 + np.mod(np.where(fin, lon, 0.0) - w0, 360.0)
        p = np.clip(np.searchsorted(self._uwest, x, side="right") - 1, 0, self._ulon.size - 1)
        inside = fin & (True if self.is_global else x <= self._ueast[p])
        return np.where(fin, x, np.nan), np.where(inside, p, -1)

    # -- cell centres -------------------------------------------------------------------
    @property
    def size(self) -> int:
        """Number of horizontal cells."""
        return self.shape[0] * self.shape[1]

    def cell_latlon(self, flat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Centre latitude and longitude (degrees) of flat cell indices (NaN for -1)."""
        flat = np.asarray(flat, dtype=np.int64)
        good = flat >= 0
        iy, ix = np.divmod(np.where(good, flat, 0), self.shape[1])
        if self.kind == "regular":
            la, lo = self.lat[iy], self.lon[ix]
        elif self.kind == "curvilinear":
            la, lo = self.lat2[iy, ix], self.lon2[iy, ix]
        else:
            lo, la = self._inv.transform(self.x[ix], self.y[iy])
            la, lo = np.asarray(la, dtype=np.float64), np.asarray(lo, dtype=np.float64)
        return np.where(good, la, np.nan), np.where(good, lo, np.nan)

    def _all_latlon(self) -> tuple[np.ndarray, np.ndarray]:
        if self.kind == "regular":
            la, lo = np.meshgrid(self.lat, self.lon, indexing="ij")
            return la, lo
        if self.kind == "curvilinear":
            return self.lat2, self.lon2
        return self.cell_latlon(np.arange(self.size).reshape(self.shape))

    def tree(self):  # noqa: ANN201
        """KD-tree over every cell centre (built once)."""
        if self._tree is None:
            la, lo = self._all_latlon()
            self._tree = build_kdtree(la.ravel(), lo.ravel())
        return self._tree

    def cell_areas(self, flat: np.ndarray) -> np.ndarray:
        """Cell areas in km² (exact spherical on regular grids; equal weights otherwise)."""
        flat = np.asarray(flat, dtype=np.int64)
        if self.kind != "regular":
            return np.ones(flat.shape, dtype=np.float64)
        iy, ix = np.divmod(flat, self.shape[1])
        return cell_area_km2(self.lat_edges[iy], self.lat_edges[iy + 1], (self.lon_east - self.lon_west)[ix])

    # -- rules --------------------------------------------------------------------------
    def nearest(self, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Flat index of the cell answering each site (-1 outside the grid) and distance km."""
        lat = np.asarray(lat, dtype=np.float64)
        lon = np.asarray(lon, dtype=np.float64)
        ny, nx = self.shape
        if self.kind == "regular":
            iy = _locate_1d(self.lat_edges, lat)
            _, p = self._frame_pos(lon)
            ix = np.where(p >= 0, self._perm[np.maximum(p, 0)], -1)
            flat = np.where((iy >= 0) & (ix >= 0), iy * nx + ix, -1)
        elif self.kind == "projected":
            x, y = self._fwd.transform(lon, lat)
            ix = _locate_1d(self.x_edges, np.asarray(x, dtype=np.float64))
            iy = _locate_1d(self.y_edges, np.asarray(y, dtype=np.float64))
            iy = np.where(iy >= 0, (ny - 1 - iy) if self._ydesc else iy, -1)
            flat = np.where((iy >= 0) & (ix >= 0), iy * nx + ix, -1)
        else:
            tree = self.tree()
            good = np.isfinite(lat) & np.isfinite(lon)
            xyz = unit_vectors(np.where(good, lat, 0.0), np.where(good, lon, 0.0))
            chord, idx = tree.query(xyz)
            # a site farther from its nearest centre than that centre's own spacing is outside
            sp, _ = tree.query(tree.data[idx], k=2)
            flat = np.where(good & (chord <= sp[:, 1] * 1.0 + 1e-12), idx, -1)
        cla, clo = self.cell_latlon(flat)
        return flat.astype(np.int64), great_circle_km(lat, lon, cla, clo)

    def within(
        self, lat: np.ndarray, lon: np.ndarray, km: float
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Cells whose centres lie within ``km`` of each site, sorted by distance.

        Returns CSR arrays ``ptr`` (n + 1), ``cells`` and ``dist_km``.
        """
        lat = np.asarray(lat, dtype=np.float64)
        lon = np.asarray(lon, dtype=np.float64)
        ptr, cells, dists = [0], [], []
        for a, b in zip(lat, lon, strict=True):
            if not (np.isfinite(a) and np.isfinite(b)):
                ptr.append(ptr[-1])
                continue
            if self.kind == "regular":
                c = self._box(a, b, km)
            else:
                c = np.asarray(self.tree().query_ball_point(unit_vectors(a, b), km_to_chord(km) * (1 + 1e-9)), dtype=np.int64)
            cla, clo = self.cell_latlon(c)
            d = great_circle_km(a, b, cla, clo)
            keep = d <= km
            order = np.argsort(d[keep], kind="stable")
            cells.append(c[keep][order])
            dists.append(d[keep][order])
            ptr.append(ptr[-1] + int(keep.sum()))
        return np.asarray(ptr, dtype=np.int64), _cat(cells, np.int64), _cat(dists, np.float64)

    def _box(self, lat: float, lon: float, km: float) -> np.ndarray:
        """Cells that can lie within ``km`` of the site: a latitude band and, per the
        exact spherical bound, the longitudes within asin(sin δ / cos φ) (wrapped)."""
        dlat = np.degrees(km / EARTH_RADIUS_KM)
        iy = np.nonzero(np.abs(self.lat - lat) <= dlat * (1 + 1e-9) + 1e-12)[0]
        if abs(lat) + dlat >= 90.0 - 1e-9:
            dlon = 180.0
        else:
            dlon = float(np.degrees(np.arcsin(min(np.sin(km / EARTH_RADIUS_KM) / np.cos(np.radians(lat)), 1.0))))
        off = np.mod(self.lon - lon + 180.0, 360.0) - 180.0
        ix = np.nonzero(np.abs(off) <= dlon * (1 + 1e-9) + 1e-12)[0]
        return (iy[:, None] * self.shape[1] + ix[None, :]).ravel()


def bilinear_cells(geom: GridGeometry, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Four neighbour cells (n, 4) and bilinear weights (n, 4) on a regular grid.

    Sites between the outermost centre and the grid edge use the edge row / column
    (weights collapse onto it, also beside a longitude gap); global grids, and regional
    grids whose cells run on across ±180°, wrap in longitude. Sites outside get -1.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = GridGeometry(make_grid(lat=[0.0, 1.0], lon=[0.0, 1.0], periods=1, seed=0))
    >>> c, w = bilinear_cells(g, np.array([0.25]), np.array([0.5]))
    >>> c.tolist(), w.tolist()
    ([[0, 1, 2, 3]], [[0.375, 0.375, 0.125, 0.125]])
    """
    if geom.kind != "regular":
        raise InputError("The 'bilinear' spatial rule needs a regular lat/lon grid; use 'nearest' or 'buffer:Rkm'.")
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    ny, nx = geom.shape
    inside, _ = geom.nearest(lat, lon)
    la = geom.lat
    j = np.clip(np.searchsorted(la, lat, side="right") - 1, 0, max(ny - 2, 0))
    j1 = np.minimum(j + 1, ny - 1)
    ty = np.where(j1 > j, (lat - la[j]) / np.where(j1 > j, la[j1] - la[j], 1.0), 0.0)
    ty = np.clip(ty, 0.0, 1.0)
    lo = geom._ulon
    lon_w, pos = geom._frame_pos(lon)
    if geom.is_global:
        ext = np.concatenate([lo, [lo[0] + 360.0]])
        lon_w = lo[0] + np.mod(np.where(np.isfinite(lon), lon, 0.0) - lo[0], 360.0)
        i = np.clip(np.searchsorted(ext, lon_w, side="right") - 1, 0, nx - 1)
        i1 = (i + 1) % nx
        tx = (lon_w - ext[i]) / (ext[i + 1] - ext[i])
    else:
        # in the frame: contiguous across ±180° on a regional grid that crosses it
        i = np.clip(np.searchsorted(lo, lon_w, side="right") - 1, 0, max(nx - 2, 0))
        i1 = np.minimum(i + 1, nx - 1)
        tx = np.where(i1 > i, (lon_w - lo[i]) / np.where(i1 > i, lo[i1] - lo[i], 1.0), 0.0)
        if geom._ugap.any():  # never across a gap: the weights collapse onto the cell holding the site
            across = (i1 > i) & geom._ugap[np.minimum(i, max(nx - 2, 0))]
            own = np.maximum(pos, 0)
            i, i1, tx = np.where(across, own, i), np.where(across, own, i1), np.where(across, 0.0, tx)
    i, i1 = geom._perm[i], geom._perm[i1]
    tx = np.clip(tx, 0.0, 1.0)
    cells = np.stack([j * nx + i, j * nx + i1, j1 * nx + i, j1 * nx + i1], axis=1)
    w = np.stack([(1 - ty) * (1 - tx), (1 - ty) * tx, ty * (1 - tx), ty * tx], axis=1)
    bad = inside < 0
    cells[bad] = -1
    w[bad] = 0.0
    return cells.astype(np.int64), w


def polygon_cells(geom: GridGeometry, wkt: str) -> tuple[np.ndarray, np.ndarray, bool]:
    """Flat cells a WKT polygon (lon/lat) overlaps, their inside areas (km²) and a
    flag saying the polygon is smaller than the largest cell it touches.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = GridGeometry(make_grid(lat=[0.5], lon=[0.5, 1.5], periods=1, seed=0))
    >>> c, a, small = polygon_cells(g, "POLYGON ((0.5 0.2, 1.5 0.2, 1.5 0.4, 0.5 0.4, 0.5 0.2))")
    >>> c.tolist(), small
    ([0, 1], True)
    """
    import shapely

    if geom.kind == "curvilinear":
        raise InputError("The 'polygon' spatial rule needs a regular lat/lon or a projected grid; use 'buffer:Rkm' on this curvilinear grid.")
    try:
        poly = shapely.from_wkt(wkt)
    except shapely.errors.GEOSException as exc:
        raise InputError(f"Cannot read the site polygon {wkt[:60]!r}: {exc}") from exc
    if geom.kind == "projected":
        return _projected_polygon_cells(geom, poly)
    bounds = np.column_stack([geom._uwest, geom._ueast])  # the frame: contiguous across ±180°
    iy, pos, area, frac = polygon_cell_overlaps(poly, geom.lat_edges, bounds, wrap=True)
    flat = iy * geom.shape[1] + geom._perm[pos]
    step = float(min(np.min(np.diff(geom.lat_edges)), np.min(bounds[:, 1] - bounds[:, 0]))) / 4.0
    small = bool(area.size and polygon_area_km2(poly, step) < geom.cell_areas(flat).max())
    return flat.astype(np.int64), area, small


def _projected_polygon_cells(geom: GridGeometry, poly) -> tuple[np.ndarray, np.ndarray, bool]:  # noqa: ANN001
    """Polygon overlaps on a projected grid: areas in the grid's plane (exact on an
    equal-area projection), reported in km² when the CRS unit is the metre."""
    import shapely

    xe, ye = geom.x_edges, geom.y_edges
    step = float(min(np.min(np.diff(xe)), np.min(np.diff(ye))))
    dense = shapely.segmentize(poly, max_segment_length=0.01)

    def fwd(xy: np.ndarray) -> np.ndarray:
        x, y = geom._fwd.transform(xy[:, 0], xy[:, 1])
        return np.column_stack([x, y])

    p = shapely.segmentize(shapely.transform(dense, fwd), max_segment_length=step / 4.0)
    minx, miny, maxx, maxy = p.bounds
    x0 = max(int(np.searchsorted(xe, minx, side="right")) - 1, 0)
    x1 = min(int(np.searchsorted(xe, maxx, side="left")), xe.size - 1)
    y0 = max(int(np.searchsorted(ye, miny, side="right")) - 1, 0)
    y1 = min(int(np.searchsorted(ye, maxy, side="left")), ye.size - 1)
    if x1 <= x0 or y1 <= y0:
        return np.array([], dtype=np.int64), np.array([]), False
    gy, gx = np.meshgrid(np.arange(y0, y1), np.arange(x0, x1), indexing="ij")
    jy, jx = gy.ravel(), gx.ravel()
    boxes = shapely.box(xe[jx], ye[jy], xe[jx + 1], ye[jy + 1])
    inter = shapely.area(shapely.intersection(boxes, p))
    keep = inter > 0
    cell = (xe[jx + 1] - xe[jx]) * (ye[jy + 1] - ye[jy])
    row = (geom.shape[0] - 1 - jy) if geom._ydesc else jy
    flat = row[keep] * geom.shape[1] + jx[keep]
    small = bool(keep.any() and inter[keep].sum() < cell[keep].max())
    return flat.astype(np.int64), inter[keep] / 1e6, small
