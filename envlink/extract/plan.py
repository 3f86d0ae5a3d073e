"""The extraction plan: everything the read and compute steps of ``attach`` need, in one object.

:class:`ExtractionPlan` is built by the planning steps of :func:`envlink.extract.attach.attach`
(grid geometry and time steps, the baseline, then each row's site, window and
sources) and read by the spatial rules (:mod:`envlink.extract.rules`), the
statistics (:mod:`envlink.extract.statistics`) and :mod:`envlink.extract.compute`.
It is frozen: a step that learns more (the sources, or the cells a ``nearest-valid``
search chose) returns a new plan with :func:`dataclasses.replace`.
:class:`Block` is one block of sources being computed.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from envlink.core.flags import RowFlags
    from envlink.core.registry import Choice
    from envlink.extract.sources import Sources
    from envlink.extract.spatial import GridGeometry
    from envlink.extract.stats import Spans, Steps

__all__ = ["ExtractionPlan", "Block"]


@dataclass(frozen=True)
class ExtractionPlan:
    """One request of :func:`~envlink.extract.attach.attach`, planned for every row.

    Attributes
    ----------
    stat, window, spatial : Choice
        The parsed statistic, window and spatial rule (registry choices; their
        ``entry.obj`` does the work, ``value`` is the argument).
    time_weights : {"duration", "equal"}
    min_coverage : float
        Least fraction of a window's days with data for a value.
    mmm : float, xarray.DataArray or None
        The maximum monthly mean given for ``dhw-max``.
    geom : GridGeometry
        The grid's horizontal layout.
    steps : Steps
        The grid's time steps as day numbers in its calendar.
    calendar : str
    in_base : ndarray of bool
        The time steps inside the baseline.
    base : (float, float)
        The baseline as day numbers ``[b0, b1)``.
    lat, lon : ndarray
        Each row's site (NaN where none).
    wkt : ndarray of str
        Each row's polygon (``""`` where none).
    active : ndarray of bool
        Rows that still ask for a value.
    window_start : ndarray
        Each row's window start (day number; the baseline's start where none).
    spans : Spans
        Each row's window over the time steps.
    sources : Sources, optional
        Each row's source (cells and weights), once chosen.
    shared : dict
        Work the covariates of one call share (every row's sites and cells, candidate
        cells of a ``nearest-valid`` search), keyed by what it was computed from.
    """

    stat: Choice[Any]
    window: Choice[Any]
    spatial: Choice[Any]
    time_weights: str
    min_coverage: float
    mmm: Any
    geom: GridGeometry
    steps: Steps
    calendar: str
    in_base: np.ndarray
    base: tuple[float, float]
    lat: np.ndarray
    lon: np.ndarray
    wkt: np.ndarray
    active: np.ndarray
    window_start: np.ndarray
    spans: Spans
    sources: Sources | None = None
    shared: dict[Any, Any] = field(default_factory=dict, repr=False, compare=False)

    @property
    def n(self) -> int:
        """Number of rows."""
        return int(self.lat.size)

    @property
    def rule(self) -> Any:
        """The spatial rule object (see :mod:`envlink.extract.rules`)."""
        return self.spatial.entry.obj

    @property
    def statistic(self) -> Any:
        """The statistic object (see :mod:`envlink.extract.statistics`)."""
        return self.stat.entry.obj

    @property
    def src(self) -> Sources:
        """The sources (set once the spatial rule has chosen them)."""
        if self.sources is None:
            raise RuntimeError("the plan has no sources yet")
        return self.sources


@dataclass(frozen=True)
class Block:
    """Sources ``a`` to ``b`` (exclusive) and the rows reading them.

    Attributes
    ----------
    a, b : int
        First and end source of the block.
    rows : ndarray of int
        The rows (of the table) whose source lies in the block.
    loc : ndarray of int
        Each of those rows' source, counted from ``a``.
    sp : Spans
        Those rows' spans.
    flags : RowFlags
        Extra QA codes (over every row of the table) a statistic or rule adds.
    """

    a: int
    b: int
    rows: np.ndarray
    loc: np.ndarray
    sp: Spans
    flags: RowFlags
