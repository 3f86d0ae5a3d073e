"""Mixed-effects meta-regression: estimators, tests, multilevel models and diagnostics.

The public entry points are :class:`envlink.metareg.model.MetaRegression` and
:func:`envlink.metareg.model.meta_regression`, also exported at the top level of
``envlink``. They load on first access, so the vocabularies
(:mod:`envlink.metareg.vocabulary`) and the model frame can be imported by the command
line and the project file without loading SciPy or numba.
"""

from __future__ import annotations

import importlib
from typing import Any

#: public name -> module that defines it (imported on first access)
_LAZY: dict[str, str] = {
    "MetaRegression": "envlink.metareg.model",
    "MetaRegressionWarning": "envlink.metareg.attributes",
    "NotFittedError": "envlink.metareg.attributes",
    "meta_regression": "envlink.metareg.model",
    "ModelFrame": "envlink.metareg.frame",
    "model_frame": "envlink.metareg.frame",
    "ESTIMATORS": "envlink.metareg.vocabulary",
    "TESTS": "envlink.metareg.vocabulary",
}

__all__ = list(_LAZY)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'envlink.metareg' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
