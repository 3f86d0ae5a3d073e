"""Small-study and publication-bias diagnostics over effects ``y`` and variances ``v``.

Egger's regression test (Egger et al. 1997), trim-and-fill (Duval & Tweedie 2000)
and Rosenthal's (1979) fail-safe N. Pure NumPy / SciPy on arrays; they need no fitted
model. Formulas and citations: ``docs/methods.md``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from envlink.errors import DiagnosticWarning, InputError, ModelError, param_error, user_stacklevel
from envlink.metareg.vocabulary import ESTIMATORS

__all__ = [
    "EggerResult",
    "TrimFillResult",
    "DiagnosticWarning",
    "egger_test",
    "trim_and_fill",
    "fail_safe_n",
]

Side = Literal["left", "right"]


def _arrays(y: ArrayLike, v: ArrayLike, caller: str, min_k: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    try:
        yy = np.asarray(y, dtype=np.float64).ravel()
        vv = np.asarray(v, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise InputError(f"{caller} needs numeric effects y and variances v; {exc}.") from exc
    if yy.shape != vv.shape:
        raise InputError(f"{caller}: y has {yy.size} values but v has {vv.size}; give one variance per effect.")
    bad_y = np.flatnonzero(~np.isfinite(yy))
    if bad_y.size:
        raise InputError(
            f"{caller}: effect y[{bad_y[0]}] is {float(yy[bad_y[0]])!r} ({bad_y.size} non-finite in all); "
            "drop or fix rows without an effect first."
        )
    bad_v = np.flatnonzero(~(np.isfinite(vv) & (vv > 0)))
    if bad_v.size:
        raise InputError(
            f"{caller}: variance v[{bad_v[0]}] is {float(vv[bad_v[0]])!r} ({bad_v.size} bad in all); "
            "sampling variances must be finite and > 0."
        )
    if yy.size < min_k:
        raise ModelError(f"{caller} needs at least {min_k} effects; got {yy.size}.")
    return yy, vv


def _pool(y: NDArray[np.float64], v: NDArray[np.float64], method: str) -> tuple[float, float, float]:
    """Random-effects pooled mean of an intercept-only model: ``(mu, se, tau2)``.

    tau² from :func:`envlink.metareg.estimators.estimate_tau2` (``DL``: DerSimonian &
    Laird 1986; ``REML``: Fisher scoring from DL, tau² kept >= 0).
    """
    from envlink.metareg.design import design_from_arrays
    from envlink.metareg.estimators import estimate_tau2

    fit = estimate_tau2(design_from_arrays(y, v, None, intercept=True), method,
                        tol=1e-12, max_iter=200, use_numba=False)  # fmt: skip
    tau2 = fit.tau2
    if not fit.converged:
        warnings.warn(
            f"REML pooling did not converge in 200 Fisher-scoring steps (tau² = {tau2:.6g}); "
            "try tau2_method='DL'.",
            DiagnosticWarning,
            stacklevel=user_stacklevel(),
        )
    w = 1.0 / (v + tau2)
    sw = w.sum()
    return float((w @ y) / sw), float(math.sqrt(1.0 / sw)), float(tau2)


# ---------------------------------------------------------------- Egger


@dataclass(frozen=True)
class EggerResult:
    """Egger's regression test: OLS of ``y / se`` on ``1 / se`` (Egger et al. 1997).

    ``intercept`` measures funnel asymmetry (its t test on ``k - 2`` df is the test);
    ``slope`` estimates the effect of a study of infinite precision.
    """

    k: int
    intercept: float
    intercept_se: float
    statistic: float
    df: int
    p_value: float
    slope: float
    slope_se: float

    def funnel_line(self, se: ArrayLike) -> NDArray[np.float64]:
        """The fitted line in funnel-plot axes: ``effect = slope + intercept * se``."""
        return self.slope + self.intercept * np.asarray(se, dtype=np.float64)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict of the fields."""
        return {f: getattr(self, f) for f in self.__dataclass_fields__}


def egger_test(y: ArrayLike, v: ArrayLike) -> EggerResult:
    """Egger's regression test for funnel-plot asymmetry.

    Ordinary least squares of the standard normal deviate ``y_i / se_i`` on the
    precision ``1 / se_i`` (``se_i = sqrt(v_i)``); the intercept's t test on
    ``k - 2`` degrees of freedom (two-sided p). Equivalently, the weighted regression
    of ``y`` on ``se`` with weights ``1 / v``, whose slope is Egger's intercept.

    Parameters
    ----------
    y, v : array_like
        Effects and their sampling variances (finite, ``v > 0``), at least 3.

    Returns
    -------
    EggerResult

    Raises
    ------
    InputError
        Non-finite effects or non-positive variances (the first index is named).
    ModelError
        Fewer than 3 effects, or all variances equal (the regression is undefined).

    Examples
    --------
    >>> r = egger_test([0.1, 0.3, 0.5, 0.2, 0.7], [0.01, 0.04, 0.09, 0.02, 0.16])
    >>> round(r.intercept, 4), r.df
    (1.9967, 3)
    """
    yy, vv = _arrays(y, v, "egger_test", 3)
    se = np.sqrt(vv)
    x = 1.0 / se
    z = yy / se
    k = yy.size
    xm = x.mean()
    sxx = ((x - xm) ** 2).sum()
    if not sxx > 1e-14 * max(1.0, (x**2).sum()):
        raise ModelError(
            "egger_test: all variances are equal, so precision does not vary and the "
            "regression is undefined."
        )
    slope = float(((x - xm) @ (z - z.mean())) / sxx)
    intercept = float(z.mean() - slope * xm)
    resid = z - intercept - slope * x
    sigma2 = float(resid @ resid) / (k - 2)
    intercept_se = math.sqrt(sigma2 * (1.0 / k + xm**2 / sxx))
    slope_se = math.sqrt(sigma2 / sxx)
    if intercept_se > 0:
        t = intercept / intercept_se
        p = float(2 * stats.t.sf(abs(t), k - 2))
    else:
        t = math.copysign(math.inf, intercept) if intercept != 0 else 0.0
        p = 0.0 if intercept != 0 else 1.0
    return EggerResult(k, intercept, intercept_se, float(t), k - 2, p, slope, slope_se)


# ---------------------------------------------------------------- trim and fill


@dataclass(frozen=True)
class TrimFillResult:
    """Trim-and-fill (Duval & Tweedie 2000): missing studies imputed on one side.

    ``y``, ``v`` hold the ``k`` original effects followed by the ``k0`` filled ones
    (``filled`` marks them); ``estimate`` / ``se`` / ``tau2`` pool all ``k + k0``;
    ``center`` is the pooled estimate of the trimmed set, about which the ``k0``
    most extreme effects on the other side were mirrored.
    """

    k: int
    k0: int
    side: Side
    estimator: str
    tau2_method: str
    estimate: float
    se: float
    ci_low: float
    ci_high: float
    tau2: float
    estimate_unadjusted: float
    se_unadjusted: float
    center: float
    statistic: float
    iterations: int
    converged: bool
    y: NDArray[np.float64] = field(repr=False)
    v: NDArray[np.float64] = field(repr=False)
    filled: NDArray[np.bool_] = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict (arrays as lists)."""
        out = {f: getattr(self, f) for f in self.__dataclass_fields__}
        for f in ("y", "v", "filled"):
            out[f] = out[f].tolist()
        return out


def _pooling_estimator(name: Any, caller: str) -> Any:
    """The canonical label of ``DL`` or ``REML`` in any spelling the estimators' registry reads."""
    label = ESTIMATORS.parse(name).label() if ESTIMATORS.accepts(name) else None
    if label not in ("DL", "REML"):  # the two estimators offered for the pooling
        raise param_error("tau2_method", caller, "'DL' or 'REML'", name)
    return label


def _rank_estimate(dev: NDArray[np.float64], estimator: str) -> tuple[int, float]:
    """k0 from centred deviations, missing studies assumed on the left."""
    k = dev.size
    ranks = stats.rankdata(np.abs(dev))
    if estimator == "L0":
        t_n = float(ranks[dev > 0].sum())
        value = (4.0 * t_n - k * (k + 1)) / (2.0 * k - 1)
    else:  # R0: length of the rightmost run of positive ranks, minus one
        order = np.argsort(-np.abs(dev), kind="stable")
        negative = np.flatnonzero(dev[order] <= 0)
        run = int(negative[0]) if negative.size else k
        value = float(run - 1)
    k0 = max(0, int(math.floor(value + 0.5)))
    return min(k0, k - 1), value


def trim_and_fill(
    y: ArrayLike,
    v: ArrayLike,
    *,
    side: Side | None = None,
    estimator: Literal["L0", "R0"] = "L0",
    tau2_method: Literal["DL", "REML"] = "DL",
    max_iter: int = 100,
    level: float = 0.95,
) -> TrimFillResult:
    """Duval & Tweedie's (2000) trim-and-fill, random-effects pooling, no moderators.

    With the missing studies assumed on ``side``: pool the trimmed set (at first all
    ``k``), centre all effects on it, rank ``|y_i - mu|`` (average ranks for ties),
    and estimate ``k0`` by ``L0 = (4 T_n - k (k + 1)) / (2 k - 1)`` (``T_n``: the rank
    sum of the effects on the other side) or ``R0 = γ* - 1`` (``γ*``: the run of
    highest ranks all on the other side), rounded half up, >= 0; trim the ``k0`` most
    extreme effects on the other side; repeat until ``k0`` stops changing. Then mirror
    the trimmed effects about the trimmed estimate (``2 mu - y_i``, same variance) and
    pool all ``k + k0``.

    Parameters
    ----------
    y, v : array_like
        Effects and sampling variances, at least 3.
    side : {"left", "right"}, optional
        Where studies are missing. By default from the sign of Egger's intercept: a
        positive intercept (small studies show larger effects) means missing on the
        left.
    estimator : {"L0", "R0"}, default "L0"
    tau2_method : {"DL", "REML"}, default "DL"
        tau² estimator of the random-effects pooling (any spelling that
        :data:`~envlink.metareg.vocabulary.ESTIMATORS` reads, e.g. ``"dersimonian-laird"``).
    max_iter : int, default 100
        Iteration cap; if reached, ``converged`` is False and a
        :class:`DiagnosticWarning` says so.
    level : float, default 0.95
        Confidence level of ``ci_low`` / ``ci_high`` (normal quantiles).

    Returns
    -------
    TrimFillResult

    Examples
    --------
    >>> r = trim_and_fill([0.1, 1.1, 1.3, 1.5, 1.6, 1.8, 1.9], [1] * 7, side="left")
    >>> r.k0, round(r.center, 4), r.y[r.filled].round(4).tolist(), round(r.estimate, 4)
    (2, 1.12, [0.44, 0.34], 1.12)
    """
    caller = "trim_and_fill"
    if side not in (None, "left", "right"):
        raise param_error("side", caller, "None, 'left' or 'right'", side)
    if estimator not in ("L0", "R0"):
        raise param_error("estimator", caller, "'L0' or 'R0'", estimator)
    tau2_method = _pooling_estimator(tau2_method, caller)
    if not (isinstance(max_iter, int) and max_iter >= 1):
        raise param_error("max_iter", caller, "a positive integer", max_iter)
    if not (0 < level < 1):
        raise param_error("level", caller, "a number between 0 and 1", level)
    yy, vv = _arrays(y, v, caller, 3)
    k = yy.size
    if side is None:
        try:
            side = "left" if egger_test(yy, vv).intercept >= 0 else "right"
        except ModelError as exc:
            raise InputError(
                "trim_and_fill cannot choose the side from Egger's test (all variances are "
                "equal); pass side='left' or side='right'."
            ) from exc
    sign = 1.0 if side == "left" else -1.0
    work = sign * yy
    order = np.argsort(work, kind="stable")
    k0, value, mu, converged, iterations = 0, 0.0, 0.0, False, 0
    for iterations in range(1, max_iter + 1):  # noqa: B007  (the count is reported)
        keep = order[: k - k0]
        mu = _pool(work[keep], vv[keep], tau2_method)[0]
        new_k0, value = _rank_estimate(work - mu, estimator)
        if new_k0 == k0:
            converged = True
            break
        k0 = new_k0
    if not converged:
        warnings.warn(
            f"trim_and_fill did not settle on k0 within {max_iter} iterations (last k0 = {k0}); "
            "the result is from the last iteration. Raise max_iter or treat k0 as uncertain.",
            DiagnosticWarning,
            stacklevel=user_stacklevel(),
        )
    trimmed = order[k - k0 :]
    fill_y = 2.0 * mu - work[trimmed]
    all_work = np.concatenate([work, fill_y])
    all_v = np.concatenate([vv, vv[trimmed]])
    est, se, tau2 = _pool(all_work, all_v, tau2_method)
    est0, se0, _ = _pool(work, vv, tau2_method)
    zq = float(stats.norm.isf((1 - level) / 2))
    est, est0, center = sign * est, sign * est0, sign * mu
    return TrimFillResult(
        k=k,
        k0=k0,
        side=side,
        estimator=estimator,
        tau2_method=tau2_method,
        estimate=est,
        se=se,
        ci_low=est - zq * se,
        ci_high=est + zq * se,
        tau2=tau2,
        estimate_unadjusted=est0,
        se_unadjusted=se0,
        center=center,
        statistic=value,
        iterations=iterations,
        converged=converged,
        y=sign * all_work,
        v=all_v,
        filled=np.concatenate([np.zeros(k, dtype=bool), np.ones(k0, dtype=bool)]),
    )


# ---------------------------------------------------------------- fail-safe N


def fail_safe_n(y: ArrayLike, v: ArrayLike, *, alpha: float = 0.05) -> int:
    """Rosenthal's (1979) fail-safe N: null studies needed to lose significance.

    With ``z_i = y_i / sqrt(v_i)`` combined by Stouffer's sum, ``Z = Σ z_i / sqrt(k)``,
    and the one-tailed critical value ``z_α``, adding ``N`` studies with ``z = 0``
    gives ``Σ z_i / sqrt(k + N)``; the fail-safe N is the smallest integer ``N`` with
    ``Σ z_i / sqrt(k + N) <= z_α``, that is ``ceil((Σ z_i)² / z_α² - k)``, and 0 when
    the combined result is not significant already (direction taken from the sum).

    Parameters
    ----------
    y, v : array_like
        Effects and sampling variances (at least 1).
    alpha : float, default 0.05
        One-tailed significance level.

    Returns
    -------
    int

    Examples
    --------
    >>> fail_safe_n([0.5, 0.4, 0.6], [0.04, 0.04, 0.04])
    18
    """
    if not (0 < alpha < 1):
        raise param_error("alpha", "fail_safe_n", "a number between 0 and 1", alpha)
    yy, vv = _arrays(y, v, "fail_safe_n", 1)
    total = float((yy / np.sqrt(vv)).sum())
    z_alpha = float(stats.norm.isf(alpha))
    n = total**2 / z_alpha**2 - yy.size
    return max(0, math.ceil(n - 1e-9 * max(1.0, abs(n))))
