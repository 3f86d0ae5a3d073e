"""The ``bilinear`` spatial rule: the four neighbouring cell centres, bilinear weights."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from envlink.extract.rules.base import SpatialRule

if TYPE_CHECKING:
    from envlink.extract.plan import Block, ExtractionPlan
    from envlink.extract.sources import Sources

__all__ = ["Bilinear", "RULE"]


class Bilinear(SpatialRule):
    """Four neighbours weighted bilinearly (regular grids); a neighbour without data
    at a step drops out and the others' weights are renormalised."""

    def sources(self, plan: ExtractionPlan) -> Sources:
        from envlink.core.flags import RowFlags
        from envlink.extract.sources import Sources, site_cells
        from envlink.extract.spatial import bilinear_cells

        sc = site_cells(plan.geom, plan.lat, plan.lon, plan.active, plan.shared)
        c, w = bilinear_cells(plan.geom, sc.ulat_q, sc.ulon_q)
        c[~sc.real] = -1
        ok = c[:, 0] >= 0
        src_of_site = np.where(ok, np.cumsum(ok) - 1, -1)
        cc, ww = c[ok], w[ok]
        ptr = np.arange(0, 4 * cc.shape[0] + 1, 4)
        return Sources(ptr, cc.ravel(), ww.ravel(), sc.per_row(src_of_site), sc.row_cell, sc.row_dist,
                       RowFlags(plan.n))

    def check_block(self, plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray, blk: Block,
                    cov: np.ndarray) -> None:
        """Flag rows where a neighbour with weight lacks data the value's window has."""
        from envlink.extract.compute import coverage

        srcs = plan.src
        base = srcs.ptr[srcs.row_src[blk.rows]]
        for k in range(4):
            ck = coverage(X, plan.steps, xrow[base + k], blk.sp)
            miss = (srcs.weights[base + k] > 0) & (ck < cov - 1e-9)
            blk.flags.add(blk.rows[miss], "bilinear_missing_neighbour")


RULE = Bilinear(
    "bilinear",
    "the four neighbouring cell centres, weighted bilinearly (regular lat/lon grids)",
)
