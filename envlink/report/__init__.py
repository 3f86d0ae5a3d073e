"""The HTML report and the model figures.

- :mod:`envlink.report.plots`: each figure from plain arrays;
- :mod:`envlink.report.figures`: the model figures of a fit (:func:`model_figures`,
  :func:`write_figures`);
- :mod:`envlink.report.sections`, :mod:`envlink.report.html`: the page
  (:func:`render_report`, :func:`write_report`);
- :mod:`envlink.report.vocabulary`: :data:`FOREST_ORDERS`.

Names load on first access, so reading the vocabulary (as the command line's parser
does) imports neither matplotlib nor pandas.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from envlink.report.figures import ModelFigure, model_figures, write_figures
    from envlink.report.html import render_report, write_report
    from envlink.report.vocabulary import FOREST_ORDERS

_LAZY = {
    "write_report": "envlink.report.html",
    "render_report": "envlink.report.html",
    "model_figures": "envlink.report.figures",
    "write_figures": "envlink.report.figures",
    "ModelFigure": "envlink.report.figures",
    "FOREST_ORDERS": "envlink.report.vocabulary",
}

__all__ = ["write_report", "render_report", "model_figures", "write_figures", "ModelFigure",
           "FOREST_ORDERS"]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'envlink.report' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
