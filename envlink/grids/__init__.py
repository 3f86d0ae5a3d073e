"""The grids stage: open any climate raster and normalise it (see :mod:`envlink.testing`).

Public entry points: :func:`open_grid` (read and normalise), :func:`grid_info` (what a
grid holds and covers) and :func:`grid_identity` (provenance and cache key).
"""

from __future__ import annotations

from envlink.grids.conventions import GridWarning, ValidRangeWarning
from envlink.grids.curvilinear import CurvilinearIndex
from envlink.grids.geotiff import project_sites
from envlink.grids.identity import grid_identity
from envlink.grids.info import GridInfo, grid_info
from envlink.grids.open import open_grid

__all__ = [
    "open_grid",
    "grid_info",
    "grid_identity",
    "GridInfo",
    "GridWarning",
    "ValidRangeWarning",
    "project_sites",
    "CurvilinearIndex",
]
