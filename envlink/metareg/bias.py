"""Small-study checks that respect the fitted model: Egger-type test, residual funnel, fail-safe N.

Run on the raw effects, the classic checks ignore the moderators and the nesting the
model found, and test something else. Here every check says which model it used:

- **Egger-type test**: the fitted model refitted with the effects' standard error
  ``sqrt(v)`` added as one more moderator (same estimator, nesting, clusters and
  test); its coefficient tests whether smaller studies report larger effects once
  the moderators are accounted for (Egger et al. 1997, in its meta-regression form);
- **residual funnel**: the fitted model's residuals against their sampling SE;
- **fail-safe N** (Rosenthal 1979): how many unpublished null studies would bring the
  combined one-tailed z below the critical value, with the null it tests stated; for
  one-group proportions no null effect is meaningful, so none is given;
- **trim-and-fill** (Duval & Tweedie 2000) only for a model without moderators or
  nesting (it has no form with them).

For one-group proportions (prevalence on the logit or arcsine scale) the sampling
variance depends on the proportion, so the funnel is asymmetric by construction and
an Egger-type test flags that without any bias: :data:`PROPORTION_CAUTION` says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from envlink.errors import EnvlinkError, MetaRegressionWarning, ModelError
from envlink.metareg.design import Design

__all__ = ["SmallStudyTest", "BiasChecks", "small_study_test", "bias_checks",
           "funnel_points", "with_funnel_points",
           "PROPORTION_CAUTION", "PRECISION_TERM"]

#: the name of the added moderator
PRECISION_TERM = "sqrt(variance)"
PROPORTION_CAUTION = (
    "These effects are one-group proportions: their sampling variance depends on the "
    "proportion itself, so the funnel is asymmetric by construction and an Egger-type test "
    "flags asymmetry even when no study is missing. Read these checks as descriptions, not as "
    "evidence of small-study bias.")


def _model_words(model: Any) -> str:
    parts = [f"{model.method_} model", f"moderators: {model.moderators or 'none'}"]
    if model.nested is not None:
        parts.append(f"nested in {model.nested}")
    if model.cluster is not None:
        parts.append(f"CR2 by {model.cluster}")
    parts.append(f"{model.test_} tests")
    return ", ".join(parts)


@dataclass
class SmallStudyTest:
    """The Egger-type test: the coefficient of ``sqrt(v)`` added to the fitted model."""

    estimate: float
    se: float
    statistic: float
    p: float
    df: float | None
    test: str
    k: int
    model: str
    moderator_estimates: dict[str, float] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        return {"term": PRECISION_TERM, "estimate": self.estimate, "se": self.se,
                "statistic": self.statistic, "p": self.p, "df": self.df, "test": self.test,
                "k": self.k, "model": self.model,
                "coefficients_with_the_term": dict(self.moderator_estimates)}


def small_study_test(model: Any) -> SmallStudyTest:
    """Refit ``model`` with ``sqrt(variance)`` added as a moderator and test its coefficient.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.6, 0.2],
    ...                    "variance": [0.01, 0.05, 0.02, 0.09, 0.04, 0.02],
    ...                    "x": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]})
    >>> t = small_study_test(MetaRegression(moderators="x").fit(df))
    >>> t.k, t.model
    (6, 'REML model, moderators: x, z tests')
    """
    d = model.design_
    v = np.asarray(d.v, dtype=np.float64)
    X = np.column_stack([np.asarray(d.X, dtype=np.float64), np.sqrt(v)])
    names = [*d.names, PRECISION_TERM]
    dd = Design(np.asarray(d.y, dtype=np.float64), v, X, d.intercept, names, None, 0, [], None,
                dict(d.groups))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MetaRegressionWarning)
        f = type(model)(**model.get_params()).fit(dd)
    row = f.coefficients_.iloc[-1]
    df = float(row["df"]) if f.test_ == "t" else None
    others = {t: float(b) for t, b in zip(f.terms_[:-1], f.coef_[:-1], strict=True)}
    return SmallStudyTest(float(row["estimate"]), float(row["se"]), float(row["statistic"]),
                          float(row["p"]), df, f.test_, f.k_, _model_words(model), others)


@dataclass
class BiasChecks:
    """Every small-study check of one fitted model, each saying what it assumed."""

    model: str
    small_study: SmallStudyTest | None
    residual: np.ndarray
    residual_se: np.ndarray
    fail_safe_n: int | None
    fail_safe_null: str | None
    trim_and_fill: dict[str, Any] | None
    cautions: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary (the funnel's points are left to the report)."""
        return {"model": self.model,
                "small_study_test": None if self.small_study is None else self.small_study.to_dict(),
                "fail_safe_n": self.fail_safe_n, "fail_safe_null": self.fail_safe_null,
                "trim_and_fill": self.trim_and_fill, "cautions": list(self.cautions),
                "notes": list(self.notes)}

    def lines(self) -> list[str]:
        """Plain sentences for fit.txt, the command line and the report."""
        out = [f"Small-study checks of the fitted model ({self.model}):"]
        s = self.small_study
        if s is not None:
            df = f" on {s.df:.3g} df" if s.df is not None else ""
            out.append(f"  Egger-type test, {PRECISION_TERM} added to this model: coefficient "
                       f"{s.estimate:.4g} (SE {s.se:.4g}), {s.test} = {s.statistic:.3g}{df}, "
                       f"p = {s.p:.4g}")
        if self.fail_safe_null is None:
            out.append("  Fail-safe N: not given (no null effect is meaningful for these effects).")
        else:
            out.append(f"  Fail-safe N (Rosenthal 1979; null tested: {self.fail_safe_null}): "
                       f"{self.fail_safe_n}")
        if self.trim_and_fill is not None:
            tf = self.trim_and_fill
            out.append(f"  Trim-and-fill ({tf['estimator']}): k0 = {tf['k0']} on the {tf['side']}; "
                       f"adjusted estimate {tf['estimate']:.4g}")
        out += [f"  caution: {c}" for c in self.cautions]
        return out + [f"  note: {n}" for n in self.notes]


def bias_checks(model: Any, *, one_group_proportion: bool = False,
                null_effect: str | None = "effect 0 (no difference)") -> BiasChecks:
    """The small-study checks of a fitted model (see the module docs).

    Parameters
    ----------
    model : MetaRegression
        Fitted.
    one_group_proportion : bool
        The effects are one-group proportions (e.g. ``logit_proportion``): adds
        :data:`PROPORTION_CAUTION` and gives no fail-safe N.
    null_effect : str or None
        The null the fail-safe N tests, in words (None: no meaningful null, no N).
    """
    from envlink.metareg.diagnostics import fail_safe_n, trim_and_fill

    y, v, X = model.design_.dense()
    resid, resid_se = funnel_points(model)
    notes: list[str] = []
    try:
        ss: SmallStudyTest | None = small_study_test(model)
    except EnvlinkError as exc:
        ss = None
        notes.append(f"Egger-type test not run: {exc}")
    null = None if one_group_proportion else null_effect
    fsn = None
    if null is not None:
        try:
            fsn = int(fail_safe_n(y, v))
        except EnvlinkError as exc:
            notes.append(f"Fail-safe N not computed: {exc}")
    tf = None
    if model.p_ == 1 and model.nested is None and model.cluster is None:
        try:
            r = trim_and_fill(y, v, tau2_method="REML" if model.method_ == "REML" else "DL")
            tf = {k: val for k, val in r.to_dict().items() if k not in ("y", "v", "filled")}
        except (EnvlinkError, ModelError) as exc:
            notes.append(f"Trim-and-fill not run: {exc}")
    else:
        notes.append("Trim-and-fill not run: it has no form with moderators or nesting.")
    cautions = [PROPORTION_CAUTION] if one_group_proportion else []
    return BiasChecks(_model_words(model), ss, resid, resid_se, fsn, null, tf, cautions, notes)


def funnel_points(model: Any) -> tuple[np.ndarray, np.ndarray]:
    """The residual funnel's points of a fitted model: residuals and their sampling SEs.

    Parameters
    ----------
    model : MetaRegression
        Fitted.

    Returns
    -------
    residual, se : numpy.ndarray
        ``y - X b`` of the rows in the fit, and ``sqrt(v)``.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3], "variance": [0.04, 0.01, 0.09]})
    >>> r, se = funnel_points(MetaRegression().fit(df))
    >>> se.round(2).tolist()
    [0.2, 0.1, 0.3]
    """
    y, v, X = model.design_.dense()
    return y - X @ model.coef_, np.sqrt(v)


def with_funnel_points(checks: BiasChecks, model: Any) -> BiasChecks:
    """``checks`` read back from a fit's JSON, with its funnel's points from ``model``
    refitted on the same rows (the JSON does not hold them); unchanged when it has them.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> fit = MetaRegression().fit(pd.DataFrame({"effect": [0.1, 0.5], "variance": [0.04, 0.01]}))
    >>> empty = BiasChecks("m", None, np.zeros(0), np.zeros(0), None, None, None)
    >>> len(with_funnel_points(empty, fit).residual)
    2
    """
    if len(checks.residual):
        return checks
    resid, se = funnel_points(model)
    return replace(checks, residual=resid, residual_se=se)
