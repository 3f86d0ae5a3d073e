"""The ``nearest-valid:Dkm`` spatial rule: the nearest cell with data in the row's own window.

The row's own (nearest) cell is kept when its coverage of the window reaches the
minimum coverage (and is above zero); otherwise the cells whose centres lie within
D km are tried in order of distance, reading them as needed. Cells known to hold no
data at any step are skipped unread. A row moved to another cell gets the flag
``nearest_valid_<distance>km``; one with no such cell ``no_valid_cell_within_<D>km``.
A row with no such cell whose own cell has some data in the window keeps its own cell,
so its coverage and coverage flags (``partial_coverage``, ``below_min_coverage``) say
how short of the minimum it falls.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from envlink.core.earth import KM_PER_DEG
from envlink.core.registry import Arg
from envlink.extract.rules.base import SpatialRule

if TYPE_CHECKING:
    from envlink.core.flags import RowFlags
    from envlink.extract.plan import ExtractionPlan
    from envlink.extract.series import CellSeries
    from envlink.extract.sources import Sources
    from envlink.extract.spatial import GridGeometry

__all__ = ["NearestValid", "RULE", "nearest_valid"]


class NearestValid(SpatialRule):
    """Starts from the ``nearest`` cell, then searches (see the module)."""

    def sources(self, plan: ExtractionPlan) -> Sources:
        from envlink.extract.sources import single_cell_sources, site_cells

        return single_cell_sources(site_cells(plan.geom, plan.lat, plan.lon, plan.active, plan.shared), plan.n)

    def halo(self, plan: ExtractionPlan) -> tuple[int, int] | None:
        """The rows and columns within which a candidate cell can lie (see :func:`_halo`)."""
        return _halo(plan.geom, plan.lat[plan.active], float(plan.spatial.value))

    def read(self, plan: ExtractionPlan, cells: CellSeries, flags: RowFlags,
             desc: str) -> tuple[np.ndarray, np.ndarray, ExtractionPlan]:
        """The choice of :func:`nearest_valid`, made once per call for the covariates whose
        rows, windows and starting cells are the same (``plan.shared``): the others take
        the chosen cells' series from ``cells`` and the same QA codes."""
        from envlink.core.flags import RowFlags as _RowFlags

        key = _choice_key(plan, cells)
        made = plan.shared.get(key)
        if made is None:
            own = _RowFlags(plan.n)
            X, rows, srcs = nearest_valid(plan, cells, own, desc)
            plan.shared[key] = (srcs, own)
        else:
            srcs, own = made
            srcs = replace(srcs, row_flags=_RowFlags(plan.n))
            X, rows = cells.view(srcs.cells, desc=desc)
        flags.extend(own)
        return X, rows, replace(plan, sources=srcs)


def _choice_key(plan: ExtractionPlan, cells: CellSeries) -> tuple[object, ...]:
    """What a ``nearest-valid`` choice depends on: the rows' sites, windows and starting
    cells, the grid's steps, the distance and the minimum coverage (hashed arrays)."""
    import hashlib

    h = hashlib.blake2b(digest_size=16)
    sp, src = plan.spans, plan.src
    for a in (plan.active, plan.lat, plan.lon, sp.i0, sp.i1, sp.ov0, sp.ov1, sp.days, sp.has,
              plan.steps.t0, plan.steps.t1, src.ptr, src.cells, src.row_src, src.row_cell, src.row_dist):
        arr = np.ascontiguousarray(a)
        h.update(f"{arr.dtype}{arr.shape}".encode())
        h.update(arr.tobytes())
    return ("nearest-valid choice", id(cells), id(plan.geom), float(plan.spatial.value),
            float(plan.min_coverage), h.hexdigest())


def _halo(geom: GridGeometry, lat: np.ndarray, km: float) -> tuple[int, int] | None:
    """Cells (rows, columns) within which a ``nearest-valid`` candidate can lie."""
    if geom.kind != "regular" or lat.size == 0:
        return None
    dlat = float(np.min(np.diff(geom.lat_edges))) * KM_PER_DEG
    dlon = float(np.min(np.diff(geom.lon_edges))) * KM_PER_DEG
    reach = km + np.hypot(dlat, dlon)
    coslat = max(np.cos(np.radians(min(float(np.nanmax(np.abs(lat))) + reach / KM_PER_DEG, 89.0))), 1e-3)
    return int(np.ceil(reach / dlat)), int(min(np.ceil(reach / (dlon * coslat)), geom.shape[1]))


def _within(plan: ExtractionPlan, sites: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``geom.within`` of each site (CSR arrays), each site searched once per call (``plan.shared``)."""
    km = float(plan.spatial.value)
    seen: dict[tuple[float, float], tuple[np.ndarray, np.ndarray]] = plan.shared.setdefault(
        ("within", id(plan.geom), km), {})
    keys = [(float(a), float(b)) for a, b in sites]
    new = [k for k in dict.fromkeys(keys) if k not in seen]
    if new:
        arr = np.array(new, dtype=np.float64)
        ptr, cells, dist = plan.geom.within(arr[:, 0], arr[:, 1], km)
        for j, k in enumerate(new):
            seen[k] = (cells[ptr[j] : ptr[j + 1]], dist[ptr[j] : ptr[j + 1]])
    parts = [seen[k] for k in keys]
    counts = np.array([p[0].size for p in parts], dtype=np.int64)
    ptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    cells = np.concatenate([p[0] for p in parts]) if parts else np.array([], dtype=np.int64)
    dist = np.concatenate([p[1] for p in parts]) if parts else np.array([], dtype=np.float64)
    return ptr, cells.astype(np.int64), dist.astype(np.float64)


def _possible(plan: ExtractionPlan, rows: np.ndarray, thr: float) -> np.ndarray:
    """Rows whose window overlaps the grid's time steps enough that some cell could reach
    the minimum coverage (a cell with data at every step has the most)."""
    from envlink.extract.compute import _sub, coverage

    full = np.ones((1, plan.steps.t0.size), dtype=np.float32)
    most = coverage(full, plan.steps, np.zeros(rows.size, dtype=np.int64), _sub(plan.spans, rows))
    return most >= thr - 1e-9


def _search(plan: ExtractionPlan, cells: CellSeries, have: np.ndarray, fr: np.ndarray, desc: str
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """For the rows ``fr``, the nearest candidate cell with enough data in the window.

    Returns the series, the cells (``have`` plus the candidates) and each one's row in
    the series, and for the rows that found one: the rows, their cell (a position in
    the cells) and the candidate's distance.
    """
    from envlink.extract.compute import _sub, coverage
    from envlink.extract.stats import _ranges

    thr = max(plan.min_coverage, 1e-9)
    usite, inv = np.unique(np.column_stack([plan.lat[fr], plan.lon[fr]]), axis=0, return_inverse=True)
    inv = inv.ravel()
    ptr, cand, dist = _within(plan, usite)
    keep = cells.any_valid.ravel()[cand] != 0  # cells known to hold no data are skipped unread
    new = np.setdiff1d(cand[keep], have)
    X, rows = cells.view_with(have, new, desc=desc.replace("reading cells", "reading candidate cells"))
    have = np.concatenate([have, new])
    order = np.argsort(have, kind="stable")
    # candidate pairs (row, cell) in order of distance, skipping known-empty cells
    counts = np.diff(ptr)
    pr = np.repeat(fr, counts[inv])
    pos = _ranges(ptr[:-1][inv], counts[inv])
    ok = keep[pos]
    pr, pos = pr[ok], pos[ok]
    px = order[np.searchsorted(have[order], cand[pos])]
    # coverage of the candidate pairs from their own cells only
    good = coverage(X, plan.steps, rows[px], _sub(plan.spans, pr)) >= thr
    # pairs are in row order, each row's candidates by distance: first good one wins
    gr, first = np.unique(pr[good], return_index=True)
    return X, have, rows, gr, px[good][first], dist[pos[good][first]]


def nearest_valid(plan: ExtractionPlan, cells: CellSeries, flags: RowFlags,
                  desc: str = "attach: reading cells") -> tuple[np.ndarray, np.ndarray, Sources]:
    """Read cells and choose, per row, the nearest cell with data in its window (see the module).

    Returns the series, each source's row in them, and the sources.
    """
    from envlink.core.flags import RowFlags as _RowFlags
    from envlink.extract.compute import coverage
    from envlink.extract.sources import Sources

    srcs, km = plan.src, float(plan.spatial.value)
    thr = max(plan.min_coverage, 1e-9)
    cells.any_valid  # noqa: B018 - learn which cells hold no data while reading
    X, rows = cells.view(srcs.cells, desc=desc, halo=_halo(plan.geom, plan.lat[plan.active], km))
    have = srcs.cells.copy()
    row_x = srcs.row_src.copy()
    own_cov = coverage(X, plan.steps, np.where(row_x >= 0, rows[row_x], -1), plan.spans)
    fail = plan.active & ((row_x < 0) | (own_cov < thr))
    row_cell, row_dist = srcs.row_cell.copy(), srcs.row_dist.copy()
    if fail.any():
        fr = np.nonzero(fail)[0]
        # a window mostly outside the grid's time steps leaves every cell short: no search
        fr = fr[_possible(plan, fr, thr)]
        gr = np.array([], dtype=np.int64)
        if fr.size:
            X, have, rows, gr, gx, gd = _search(plan, cells, have, fr, desc)
            row_x[gr], row_cell[gr], row_dist[gr] = gx, have[gx], gd
            moved_mask = srcs.row_cell[gr] != have[gx]
            moved_code = [f"nearest_valid_{int(round(float(d)))}km" for d in gd[moved_mask]]
            flags.add(np.asarray(gr[moved_mask], dtype=np.int64), np.asarray(moved_code, dtype=object))
        missing = np.nonzero(fail)[0]
        missing = np.asarray(missing[~np.isin(missing, gr)], dtype=np.int64)
        # a site's own cell with some data in the window, short of the minimum, is kept:
        # its coverage and coverage flags then say why no cell counts as valid
        row_x[missing[~((row_x[missing] >= 0) & (own_cov[missing] > 0))]] = -1
        flags.add(missing[srcs.row_cell[missing] < 0], "outside_grid")
        flags.add(missing, f"no_valid_cell_within_{km:g}km")
    out = Sources(np.arange(have.size + 1), have, np.ones(have.size), row_x, row_cell, row_dist,
                  _RowFlags(plan.lat.size))
    return X, rows, out


RULE = NearestValid(
    "nearest-valid",
    "the nearest cell within D km that has data in the row's window (coastal sites on land cells)",
    arg=Arg.distance_km("D"),
    reads_candidates=True,
)
