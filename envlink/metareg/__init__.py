"""Mixed-effects meta-regression: estimators, tests, multilevel models and diagnostics.

The public entry points are :class:`envlink.metareg.model.MetaRegression` and
:func:`envlink.metareg.model.meta_regression`, also exported at the top level of
``envlink``.
"""

from __future__ import annotations

from envlink.metareg.model import MetaRegression, MetaRegressionWarning, meta_regression

__all__ = ["MetaRegression", "MetaRegressionWarning", "meta_regression"]
