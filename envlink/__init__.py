"""envlink: attach environmental covariates to compiled field studies and model them.

The public API is re-exported here and loaded lazily, so ``import envlink`` stays
fast and optional dependencies are only imported by the stage that needs them.

Stages (each a plain function over pandas / xarray objects):

- ``envlink.locate(table, ...)``: reported coordinates, site names and dates to
  validated sites and periods with QA flags.
- ``envlink.open_grid(source, ...)``: read and normalise a gridded raster.
- ``envlink.attach(table, grid, ...)``: covariate values per row over per-row windows;
  ``envlink.attach_many(table, grid, covariates)`` several at once, each cell read once.
- ``envlink.effect_sizes(table, kind, ...)`` and ``envlink.MetaRegression``: effect
  sizes and mixed-effects meta-regression.
- ``envlink.export_table(...)``, ``envlink.write_report(...)``: outputs.
- ``envlink.run_project(path)``: the whole job from a TOML project file.
"""

from __future__ import annotations

import importlib as _importlib
from typing import Any as _Any

from envlink import locate  # callable subpackage: envlink.locate(table, ...)
from envlink.core.versions import VERSION as __version__
from envlink.errors import EnvlinkError, EnvlinkWarning, GridError, InputError, ModelError

#: public name -> module that defines it (imported on first access)
_LAZY: dict[str, str] = {
    "parse_coordinates": "envlink.locate.coords",
    "parse_period": "envlink.locate.periods",
    "read_gazetteer": "envlink.locate.gazetteer",
    "open_grid": "envlink.grids.open",
    "grid_info": "envlink.grids.info",
    "grid_identity": "envlink.grids.identity",
    "attach": "envlink.extract.attach",
    "attach_many": "envlink.extract.attach",
    "effect_sizes": "envlink.effects",
    "group_effects": "envlink.effects",
    "MetaRegression": "envlink.metareg.model",
    "meta_regression": "envlink.metareg.model",
    "egger_test": "envlink.metareg.diagnostics",
    "trim_and_fill": "envlink.metareg.diagnostics",
    "fail_safe_n": "envlink.metareg.diagnostics",
    "scan": "envlink.project.scan",
    "scan_windows": "envlink.metareg.scan",
    "impute_dates": "envlink.project.impute",
    "export_table": "envlink.export",
    "write_report": "envlink.report",
    "load_project": "envlink.project",
    "run_project": "envlink.project",
    "run_demo": "envlink.project",
    "read_table": "envlink.tables",
    "write_table": "envlink.tables",
}

__all__ = [
    "locate",
    "EnvlinkError",
    "InputError",
    "GridError",
    "ModelError",
    "EnvlinkWarning",
    "__version__",
    *_LAZY,
]


def __getattr__(name: str) -> _Any:
    if name in _LAZY:
        value = getattr(_importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'envlink' has no attribute {name!r}")


def __dir__() -> list[str]:
    """Only the public API (``__all__``): no helper imports, no submodules."""
    return sorted(__all__)
