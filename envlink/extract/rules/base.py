"""The spatial rule object: what the ``attach`` pipeline asks of every rule.

A rule chooses each row's *source* (weighted grid cells, :mod:`envlink.extract.sources`),
reads the cells it needs, and may add QA codes while the statistic is computed.
Subclasses override :meth:`SpatialRule.sources` and, where they differ from the
plain behaviour, the other methods.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from envlink.core.registry import Arg, Entry

if TYPE_CHECKING:
    from envlink.core.flags import RowFlags
    from envlink.extract.plan import Block, ExtractionPlan
    from envlink.extract.series import CellSeries
    from envlink.extract.sources import Sources
    from envlink.extract.spatial import GridGeometry

__all__ = ["SpatialRule"]


@dataclass(frozen=True)
class SpatialRule(ABC):
    """A spatial rule: its name, argument, facts and steps.

    Attributes
    ----------
    name, summary : str
        The registered name and its one-line description.
    arg : Arg, optional
        The argument after a colon (a distance in km), None when it takes none.
    needs_wkt : bool
        Reads each row's polygon (the ``site_wkt`` column).
    reads_candidates : bool
        Chooses cells while reading them (``nearest-valid`` reads candidate cells
        until one has data in the row's window), through its own :meth:`read`.
    """

    name: str
    summary: str
    arg: Arg | None = None
    needs_wkt: bool = False
    reads_candidates: bool = False

    def entry(self) -> Entry[SpatialRule]:
        """The registry entry of this rule."""
        return Entry(self.name, self.summary, obj=self, arg=self.arg)

    def in_lon_gap(self, geom: GridGeometry, lon: np.ndarray, wkt: np.ndarray, active: np.ndarray) -> np.ndarray:
        """Active rows whose site lies in a longitude gap of the grid (outside it)."""
        from envlink.extract.gaps import in_lon_gap

        return in_lon_gap(geom, lon) & active

    @abstractmethod
    def sources(self, plan: ExtractionPlan) -> Sources:
        """The source of every active row of ``plan``."""

    def halo(self, plan: ExtractionPlan) -> tuple[int, int] | None:
        """Rows and columns around a cell lacking data whose series the rule may also need
        (gathered while reading, see :func:`envlink.extract.reader.read_cells_near_gaps`)."""
        return None

    def read(self, plan: ExtractionPlan, cells: CellSeries, flags: RowFlags,
             desc: str) -> tuple[np.ndarray, np.ndarray, ExtractionPlan]:
        """Series of the cells of the plan's sources, each source cell's row in them, the plan.

        The plain rule takes every distinct cell once from ``cells`` (memory, the
        cell-series store or the grid); a rule that chooses cells while reading returns a
        plan with its final sources.
        """
        need, xrow = np.unique(plan.src.cells, return_inverse=True)
        X, rows = cells.view(need, desc=desc)
        return X, rows[xrow.ravel()], plan

    def check_block(self, plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray, blk: Block,  # noqa: B027
                    cov: np.ndarray) -> None:
        """Add QA codes for the rows of one computed block (``cov``: their coverage).

        A hook: the rules with block checks of their own (bilinear's missing neighbours)
        override it; the others add none.
        """
