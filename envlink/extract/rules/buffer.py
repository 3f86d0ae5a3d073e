"""The ``buffer:Rkm`` spatial rule: every cell centre within R km, weighted by cell area."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from envlink.core.registry import Arg
from envlink.extract.rules.base import SpatialRule

if TYPE_CHECKING:
    from envlink.extract.plan import ExtractionPlan
    from envlink.extract.sources import Sources

__all__ = ["Buffer", "RULE"]


class Buffer(SpatialRule):
    """Cells whose centres lie within R km of the site, weighted by spherical cell area;
    a buffer holding no centre uses the site's own cell (``buffer_smaller_than_cell``)."""

    def sources(self, plan: ExtractionPlan) -> Sources:
        from envlink.core.flags import RowFlags
        from envlink.extract.sources import Sources, cat, site_cells
        from envlink.geo import great_circle_km

        geom = plan.geom
        sc = site_cells(geom, plan.lat, plan.lon, plan.active, plan.shared)
        bptr, bcells, _ = geom.within(sc.ulat_q, sc.ulon_q, float(plan.spatial.value))
        ptr: list[int] = [0]
        cell_l: list[np.ndarray] = []
        weight_l: list[np.ndarray] = []
        src_of_site = np.full(sc.ulat.size, -1)
        small = np.zeros(sc.ulat.size, dtype=bool)
        first = np.full(sc.ulat.size, -1)
        for s in range(sc.ulat.size):
            if not sc.real[s]:
                continue
            c = bcells[bptr[s] : bptr[s + 1]]
            if c.size == 0:
                if sc.near[s] < 0:
                    continue
                c, small[s] = np.array([sc.near[s]]), True
            first[s] = c[0]
            src_of_site[s] = len(ptr) - 1
            cell_l.append(c)
            weight_l.append(geom.cell_areas(c))
            ptr.append(ptr[-1] + c.size)
        row_cell = sc.per_row(first)
        la, lo = geom.cell_latlon(row_cell)
        flags = RowFlags(plan.n)
        flags.add((sc.site >= 0) & sc.per_row(small, False), "buffer_smaller_than_cell")
        return Sources(np.asarray(ptr), cat(cell_l, np.int64), cat(weight_l, np.float64), sc.per_row(src_of_site),
                       row_cell, great_circle_km(plan.lat, plan.lon, la, lo), flags)


RULE = Buffer(
    "buffer",
    "every cell centre within R km of the site, weighted by spherical cell area",
    arg=Arg.distance_km("R"),
)
