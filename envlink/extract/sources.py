"""Turning sites into *sources*: weighted sets of grid cells, one per distinct answer.

A source is a list of flat cells with weights; its series at each time step is the
weighted mean of the cells that have data at that step (weights renormalised over
the valid cells). Rows that share a source share every computation. ``nearest`` and
``nearest-valid`` sources are single cells; ``bilinear`` sources hold the four
neighbours; ``buffer`` and ``polygon`` sources hold every cell in the area, weighted
by spherical cell area (or the area inside the polygon).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from envlink.extract.flags import RowFlags
from envlink.extract.spatial import GridGeometry, bilinear_cells, polygon_cells
from envlink.geo import great_circle_km


def _cat(xs: list[np.ndarray], dt: type) -> np.ndarray:
    return np.concatenate(xs).astype(dt) if xs else np.array([], dtype=dt)


__all__ = ["Sources", "point_sources", "area_sources"]


@dataclass
class Sources:
    """CSR list of sources (``ptr``, ``cells``, ``weights``) and, per row, its source,
    the cell reported in provenance, the distance to it and extra QA flags."""

    ptr: np.ndarray
    cells: np.ndarray
    weights: np.ndarray
    row_src: np.ndarray
    row_cell: np.ndarray
    row_dist: np.ndarray
    row_flags: RowFlags

    @property
    def single(self) -> bool:
        """Every source is one cell."""
        return bool(np.all(np.diff(self.ptr) == 1))


def _unique_sites(lat: np.ndarray, lon: np.ndarray, active: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices of distinct (lat, lon) among active rows, and each row's site (-1 inactive)."""
    key = np.where(active[:, None], np.column_stack([lat, lon]), np.inf)
    uniq, inv = np.unique(key, axis=0, return_inverse=True)
    inv = inv.ravel()
    site_of_row = np.where(active, inv, -1)
    return uniq, site_of_row


def point_sources(
    geom: GridGeometry, lat: np.ndarray, lon: np.ndarray, active: np.ndarray, rule: str, km: float | None
) -> Sources:
    """Sources of the ``nearest``, ``bilinear`` and ``buffer`` rules for every row.

    ``nearest-valid`` starts from ``nearest`` (see :mod:`envlink.extract.attach`).
    """
    n = lat.size
    flags = RowFlags(n)
    uniq, site = _unique_sites(lat, lon, active)
    ulat, ulon = uniq[:, 0], uniq[:, 1]
    real = np.isfinite(ulat)
    ulat_q, ulon_q = np.where(real, ulat, 0.0), np.where(real, ulon, 0.0)
    near, dist = geom.nearest(ulat_q, ulon_q)
    near = np.where(real, near, -1)
    row_cell = np.where(site >= 0, near[np.maximum(site, 0)], -1)
    row_dist = np.where(row_cell >= 0, dist[np.maximum(site, 0)], np.nan)
    if rule in ("nearest", "nearest-valid"):
        cells, src_of_cell = np.unique(near[near >= 0], return_inverse=True)
        src_of_site = np.full(near.size, -1)
        src_of_site[near >= 0] = src_of_cell.ravel()
        row_src = np.where(site >= 0, src_of_site[np.maximum(site, 0)], -1)
        ptr = np.arange(cells.size + 1)
        return Sources(ptr, cells, np.ones(cells.size), row_src, row_cell, row_dist, flags)
    if rule == "bilinear":
        c, w = bilinear_cells(geom, ulat_q, ulon_q)
        c[~real] = -1
        ok = c[:, 0] >= 0
        src_of_site = np.where(ok, np.cumsum(ok) - 1, -1)
        cc, ww = c[ok], w[ok]
        ptr = np.arange(0, 4 * cc.shape[0] + 1, 4)
        row_src = np.where(site >= 0, src_of_site[np.maximum(site, 0)], -1)
        return Sources(ptr, cc.ravel(), ww.ravel(), row_src, row_cell, row_dist, flags)
    # buffer: cells whose centres are within km, weighted by spherical area
    bptr, bcells, bdist = geom.within(ulat_q, ulon_q, float(km or 0.0))
    bptr_l: list[int] = [0]
    cell_l: list[np.ndarray] = []
    weight_l: list[np.ndarray] = []
    src_of_site = np.full(ulat.size, -1)
    small = np.zeros(ulat.size, dtype=bool)
    first = np.full(ulat.size, -1)
    for s in range(ulat.size):
        if not real[s]:
            continue
        c = bcells[bptr[s] : bptr[s + 1]]
        if c.size == 0:
            if near[s] < 0:
                continue
            c, small[s] = np.array([near[s]]), True
        first[s] = c[0]
        src_of_site[s] = len(bptr_l) - 1
        cell_l.append(c)
        weight_l.append(geom.cell_areas(c))
        bptr_l.append(bptr_l[-1] + c.size)
    row_src = np.where(site >= 0, src_of_site[np.maximum(site, 0)], -1)
    row_cell = np.where(site >= 0, first[np.maximum(site, 0)], -1)
    la, lo = geom.cell_latlon(row_cell)
    row_dist = great_circle_km(lat, lon, la, lo)
    flags.add((site >= 0) & small[np.maximum(site, 0)], "buffer_smaller_than_cell")
    return Sources(
        np.asarray(bptr_l), _cat(cell_l, np.int64), _cat(weight_l, np.float64), row_src, row_cell, row_dist, flags
    )


def area_sources(
    geom: GridGeometry, lat: np.ndarray, lon: np.ndarray, wkt: np.ndarray, active: np.ndarray
) -> Sources:
    """Sources of the ``polygon`` rule; rows without a polygon use their nearest cell."""
    has_poly = active & (wkt != "")
    base = point_sources(geom, lat, lon, active & ~has_poly, "nearest", None)
    ptr, cells, weights = [int(x) for x in base.ptr], [base.cells], [base.weights]
    row_src, row_cell, row_dist = base.row_src.copy(), base.row_cell.copy(), base.row_dist.copy()
    flags = base.row_flags
    flags.add(active & ~has_poly, "point_site_nearest_cell")
    polys, inv = np.unique(wkt[has_poly], return_inverse=True)
    rows = np.nonzero(has_poly)[0]
    for k, text in enumerate(polys):
        c, a, small = polygon_cells(geom, str(text))
        these = rows[inv.ravel() == k]
        if c.size == 0:
            flags.add(these, "outside_grid")
            continue
        src = len(ptr) - 1
        cells.append(c)
        weights.append(a)
        ptr.append(ptr[-1] + c.size)
        main = c[np.argmax(a)]
        row_src[these], row_cell[these] = src, main
        if small:
            flags.add(these, "polygon_smaller_than_cell")
    la, lo = geom.cell_latlon(row_cell)
    row_dist = np.where(row_cell >= 0, great_circle_km(lat, lon, la, lo), np.nan)
    return Sources(
        np.asarray(ptr), np.concatenate(cells).astype(np.int64), np.concatenate(weights), row_src, row_cell, row_dist, flags
    )
