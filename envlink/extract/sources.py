"""Sources: weighted sets of grid cells, one per distinct answer, and the sites they start from.

A source is a list of flat cells with weights; its series at each time step is the
weighted mean of the cells that have data at that step (weights renormalised over
the valid cells). Rows that share a source share every computation. Each spatial
rule (:mod:`envlink.extract.rules`) builds its sources from :func:`site_cells`:
the distinct sites of the active rows and the cell holding each.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from envlink.core.flags import RowFlags

__all__ = ["Sources", "SiteCells", "site_cells", "single_cell_sources", "cat"]


def cat(xs: list[np.ndarray], dt: type) -> np.ndarray:
    """``np.concatenate`` of ``xs`` as ``dt`` (an empty array when there are none)."""
    return np.concatenate(xs).astype(dt) if xs else np.array([], dtype=dt)


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


@dataclass
class SiteCells:
    """The distinct sites of the active rows and the cell (nearest rule) of each.

    Attributes
    ----------
    site : ndarray of int
        Each row's site (-1 for inactive rows).
    ulat, ulon : ndarray
        The sites (NaN-free copies ``ulat_q``, ``ulon_q`` hold 0 where ``real`` is False).
    real : ndarray of bool
        Sites with coordinates (the inactive rows share one site without).
    near, dist : ndarray
        The cell holding each site (-1 outside the grid) and the distance to its centre, km.
    row_cell, row_dist : ndarray
        The same per row.
    """

    site: np.ndarray
    ulat: np.ndarray
    ulon: np.ndarray
    real: np.ndarray
    ulat_q: np.ndarray
    ulon_q: np.ndarray
    near: np.ndarray
    dist: np.ndarray
    row_cell: np.ndarray
    row_dist: np.ndarray

    def per_row(self, per_site: np.ndarray, fill: int | bool = -1) -> np.ndarray:
        """A per-site array taken to the rows (``fill`` for inactive rows)."""
        return np.where(self.site >= 0, per_site[np.maximum(self.site, 0)], fill)


def site_cells(geom, lat: np.ndarray, lon: np.ndarray, active: np.ndarray,  # noqa: ANN001
               memo: dict[Any, Any] | None = None) -> SiteCells:
    """Distinct (lat, lon) of the active rows, and the cell holding each (``geom.nearest``).

    With ``memo`` (a dict shared by the covariates of one call), the distinct sites of
    every row and their cells are found once, and each call takes the sites of its own
    active rows from them (the same arrays, in the same order).
    """
    if memo is None:
        key = np.where(active[:, None], np.column_stack([lat, lon]), np.inf)
        uniq, inv = np.unique(key, axis=0, return_inverse=True)
        site = np.where(active, inv.ravel(), -1)
        ulat, ulon = uniq[:, 0], uniq[:, 1]
        real = np.isfinite(ulat)
        ulat_q, ulon_q = np.where(real, ulat, 0.0), np.where(real, ulon, 0.0)
        near, dist = geom.nearest(ulat_q, ulon_q)
        near = np.where(real, near, -1)
    else:
        import hashlib

        mkey = ("site cells", id(geom), id(lat), id(lon), hashlib.sha1(np.packbits(active).tobytes()).hexdigest())
        if mkey not in memo:  # covariates whose windows leave the same rows active share them
            memo[mkey] = _memo_sites(geom, lat, lon, active, memo)
        site, ulat, ulon, real, near, dist = memo[mkey]
        ulat_q, ulon_q = np.where(real, ulat, 0.0), np.where(real, ulon, 0.0)
    row_cell = np.where(site >= 0, near[np.maximum(site, 0)], -1)
    row_dist = np.where(row_cell >= 0, dist[np.maximum(site, 0)], np.nan)
    return SiteCells(site, ulat, ulon, real, ulat_q, ulon_q, near, dist, row_cell, row_dist)


def _memo_sites(geom, lat: np.ndarray, lon: np.ndarray, active: np.ndarray,  # noqa: ANN001
                memo: dict[Any, Any]) -> tuple[np.ndarray, ...]:
    """The sites of the active rows (and one site without coordinates for the others, last,
    as ``np.unique`` orders an infinite key), from every row's sites found once."""
    key = ("sites", id(geom), id(lat), id(lon))
    if key not in memo:
        finite = np.isfinite(lat) & np.isfinite(lon)
        uniq, inv = np.unique(np.column_stack([lat[finite], lon[finite]]), axis=0, return_inverse=True)
        every = np.full(lat.size, -1)
        every[finite] = inv.ravel()
        near, dist = geom.nearest(uniq[:, 0], uniq[:, 1]) if uniq.size else (np.array([], int), np.array([]))
        memo[key] = (uniq, every, near, dist)
    uniq, every, near, dist = memo[key]
    used, local = np.unique(every[active], return_inverse=True)  # active rows have coordinates
    site = np.full(lat.size, -1)
    site[active] = local.ravel()
    ulat, ulon, unear, udist = uniq[used, 0], uniq[used, 1], near[used], dist[used]
    if (~active).any():  # the inactive rows' shared site, without coordinates
        ulat, ulon = np.append(ulat, np.inf), np.append(ulon, np.inf)
        unear, udist = np.append(unear, -1), np.append(udist, np.nan)
    real = np.isfinite(ulat)
    return site, ulat, ulon, real, np.where(real, unear, -1), udist


def single_cell_sources(sc: SiteCells, n: int) -> Sources:
    """One source per distinct cell holding a site: the ``nearest`` sources."""
    near = sc.near
    cells, src_of_cell = np.unique(near[near >= 0], return_inverse=True)
    src_of_site = np.full(near.size, -1)
    src_of_site[near >= 0] = src_of_cell.ravel()
    row_src = sc.per_row(src_of_site)
    return Sources(np.arange(cells.size + 1), cells, np.ones(cells.size), row_src, sc.row_cell, sc.row_dist,
                   RowFlags(n))
