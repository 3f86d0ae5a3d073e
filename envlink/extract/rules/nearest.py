"""The ``nearest`` spatial rule: the cell whose edges contain the site."""

from __future__ import annotations

from typing import TYPE_CHECKING

from envlink.extract.rules.base import SpatialRule

if TYPE_CHECKING:
    from envlink.extract.plan import ExtractionPlan
    from envlink.extract.sources import Sources

__all__ = ["Nearest", "RULE"]


class Nearest(SpatialRule):
    """One cell per site: the cell containing it (regular and projected grids, by cell
    edges) or the nearest centre (curvilinear grids); sites outside get none."""

    def sources(self, plan: ExtractionPlan) -> Sources:
        from envlink.extract.sources import single_cell_sources, site_cells

        return single_cell_sources(site_cells(plan.geom, plan.lat, plan.lon, plan.active, plan.shared), plan.n)


RULE = Nearest(
    "nearest",
    "the cell whose edges contain the site; a site beyond the grid's edges gets no value (`outside_grid`)",
)
