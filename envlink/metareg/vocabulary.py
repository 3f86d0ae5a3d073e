"""The meta-regression's vocabularies: tau² estimators, coefficient tests, prediction intervals.

:data:`ESTIMATORS` and :data:`TESTS` (and :data:`PREDICTION_INTERVALS`, the quantile
of ``MetaRegression.predict``'s prediction interval) are read by :class:`~envlink.metareg.MetaRegression`,
by ``envlink fit`` (``--method``, ``--test`` and their ``--help``), by the project
file's ``[model]`` checks and by the tables in docs/methods.md, so a name is accepted
or refused alike everywhere. Names follow the spelling policy of
:mod:`envlink.core.registry` (any case, ``-`` = ``_``, surrounding white space
ignored); outputs record the canonical label (``"REML"``, ``"knapp-hartung"``).

Each entry's ``obj`` is the rule's function, or ``"module:function"`` resolved on
first use by :func:`resolve` (so this module imports neither NumPy nor SciPy).
Estimators take ``(design, *, g0, tol, max_iter, use_numba)`` and return a
:class:`~envlink.metareg.estimators.TauFit`; tests take
``(vcov, *, yPy, k, p, truncate)`` and return a
:class:`~envlink.metareg.fitting.CovarianceScale`.

``info`` of an estimator: ``words`` (its name in words, for summaries),
``multilevel`` (usable with ``nested=``) and ``likelihood`` (``"restricted"``,
``"full"`` or None: the likelihood it maximises, which gives ``tau2_se_``); of a
test: ``words`` and ``adjusts`` (whether it rescales the model-based covariance).

Examples
--------
>>> ESTIMATORS.parse("restricted_maximum_likelihood").label(), ESTIMATORS.parse(" dl ").label()
('REML', 'DL')
>>> TESTS.parse("Knapp_Hartung").label()
'knapp-hartung'
>>> [e.name for e in ESTIMATORS if e.info["multilevel"]]
['REML', 'ML']
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from typing import Any

from envlink.core.registry import Entry, Registry

__all__ = ["ESTIMATORS", "TESTS", "PREDICTION_INTERVALS", "resolve", "multilevel_names"]

_EST = "envlink.metareg.estimators"
_TESTS = "envlink.metareg.fitting"

#: tau² estimators of the residual heterogeneity
ESTIMATORS: Registry[Any] = Registry("tau² estimator", param="method", caller="MetaRegression")
ESTIMATORS.add(Entry(
    "REML", "restricted maximum likelihood, Fisher scoring from DL (the default)",
    obj=f"{_EST}:tau2_reml", aliases=("restricted-maximum-likelihood",),
    info={"words": "restricted maximum likelihood", "multilevel": True, "likelihood": "restricted"},
))
ESTIMATORS.add(Entry(
    "ML", "maximum likelihood, Fisher scoring from DL",
    obj=f"{_EST}:tau2_ml", aliases=("maximum-likelihood",),
    info={"words": "maximum likelihood", "multilevel": True, "likelihood": "full"},
))
ESTIMATORS.add(Entry(
    "DL", "DerSimonian-Laird (1986), method of moments; no iteration",
    obj=f"{_EST}:tau2_dl", aliases=("dersimonian-laird",),
    info={"words": "DerSimonian-Laird", "multilevel": False, "likelihood": None},
))
ESTIMATORS.add(Entry(
    "PM", "Paule-Mandel (1982): generalised Q equal to its degrees of freedom",
    obj=f"{_EST}:tau2_pm", aliases=("paule-mandel",),
    info={"words": "Paule-Mandel", "multilevel": False, "likelihood": None},
))
ESTIMATORS.add(Entry(
    "HE", "Hedges (1983), from ordinary least squares residuals",
    obj=f"{_EST}:tau2_he", aliases=("hedges",),
    info={"words": "Hedges", "multilevel": False, "likelihood": None},
))
ESTIMATORS.add(Entry(
    "SJ", "Sidik-Jonkman (2005), one step from the OLS residual variance",
    obj=f"{_EST}:tau2_sj", aliases=("sidik-jonkman",),
    info={"words": "Sidik-Jonkman", "multilevel": False, "likelihood": None},
))

#: tests of the coefficients (a cluster= fit uses CR2 t tests whatever the test)
TESTS: Registry[Any] = Registry("test", param="test", caller="MetaRegression")
TESTS.add(Entry("z", "normal-theory z tests and a chi² test of the moderators (the default)",
                obj=f"{_TESTS}:z_scale", aliases=("normal",),
                info={"words": "normal (z)", "adjusts": False}))
TESTS.add(Entry("knapp-hartung", "Knapp-Hartung (2003) t tests with k - p df and an F test",
                obj=f"{_TESTS}:knapp_hartung_scale", aliases=("hartung-knapp",),
                info={"words": "Knapp-Hartung", "adjusts": True}))

#: how the quantile of a prediction interval is chosen (``MetaRegression.predict``)
PREDICTION_INTERVALS: Registry[Any] = Registry("prediction interval", param="prediction",
                                               caller="MetaRegression.predict")
PREDICTION_INTERVALS.add(Entry(
    "tests", "the distribution of the coefficient tests: normal under z tests, t with the "
    "tests' df under Knapp-Hartung or CR2 (the default)", aliases=("test-distribution",),
    info={"words": "the distribution of the coefficient tests", "df": lambda k, p, df: df},
))
PREDICTION_INTERVALS.add(Entry(
    "riley", "t with k - p - 1 df (k - 2 without moderators), Riley, Higgins & Deeks (2011)",
    aliases=("riley-higgins-deeks",),
    info={"words": "t with k - p - 1 df (Riley et al. 2011)", "df": lambda k, p, df: k - p - 1},
))


def resolve(entry: Entry[Any]) -> Callable[..., Any]:
    """The function of an entry: ``obj`` itself, or the ``"module:function"`` it names.

    Examples
    --------
    >>> resolve(ESTIMATORS["DL"]).__name__
    'tau2_dl'
    """
    obj = entry.obj
    if isinstance(obj, str):
        module, _, name = obj.partition(":")
        obj = getattr(importlib.import_module(module), name)
    if not callable(obj):
        raise TypeError(f"{entry.name!r} has no function to run")
    return obj


def multilevel_names() -> str:
    """The estimators usable with ``nested=``, in words for messages.

    Examples
    --------
    >>> multilevel_names()
    "'REML' or 'ML'"
    """
    names = [repr(e.name) for e in ESTIMATORS if e.info.get("multilevel")]
    return " or ".join([", ".join(names[:-1]), names[-1]]) if len(names) > 1 else names[0]
