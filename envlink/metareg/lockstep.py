"""Several tau² solvers sharing each pass over the data: the estimate, its interval, R²'s base.

A large fit needs more than tau²: the Q-profile interval (Viechtbauer 2007) solves
``y'P(tau²)y = q`` at two chi² quantiles, and the pseudo-R² (Raudenbush 2009) needs
tau² of the model without moderators. Solved one after the other, each takes its
own passes over the data. Here every solver is a generator of the tau² values it
needs next (:data:`~envlink.metareg.estimators.Steps`); :func:`run_together` collects
one round of requests from all of them, evaluates them in one pass
(:func:`~envlink.metareg._kernels.weighted_sums_multi`) and hands each its fits.
The sums of the model without moderators are the intercept's part of the full sums,
so that model rides along too.

The interval's bounds are found by Newton steps on ``1 / Q(tau²)`` (nearly linear in
tau², as ``Q`` behaves like ``c / (tau² + v)``), inside a bracket kept from every
evaluation of the full model made so far, including the estimator's own.
Formulas and citations: docs/methods.md.
"""

from __future__ import annotations

import math
from collections.abc import Generator
from dataclasses import dataclass, field
from typing import Any

from envlink.metareg import estimators as est
from envlink.metareg._kernels import ALL, BASE, Sums, weighted_sums_multi
from envlink.metareg.formula import moderator_positions
from envlink.metareg.vocabulary import ESTIMATORS, resolve

__all__ = ["Solver", "run_together", "q_bound_steps", "qprofile_together", "Request", "Together",
           "fit_together", "can_share", "request_for", "TOGETHER_MIN_K"]

#: from this many effects on, a fit solves its interval and R²'s base model alongside tau²
TOGETHER_MIN_K = 1 << 17

#: relative tolerance of the interval's bounds
Q_TOL = 1e-12


@dataclass
class Solver:
    """One solver: its steps, the kernel's needs for its requests, and its model.

    ``head`` None: the full model; 1: the model with the intercept only.
    """

    steps: Generator[list[float], list[est.GLS], Any]
    mode: int = ALL
    head: int | None = None


def run_together(d: Any, solvers: list[Solver], *, use_numba: bool = True,
                 pool: list[tuple[float, est.GLS]] | None = None) -> tuple[list[Any], int]:
    """Run ``solvers`` side by side, one pass over ``d`` per round; returns results and passes.

    Every fit of the full model is appended to ``pool`` (when given), so that solvers
    holding it see each other's evaluations.
    """
    results: list[Any] = [None] * len(solvers)
    pending: dict[int, list[float]] = {}
    for i, s in enumerate(solvers):
        try:
            pending[i] = next(s.steps)
        except StopIteration as stop:
            results[i] = stop.value
    passes = 0
    while pending:
        owners = [(i, t) for i, req in pending.items() for t in req]
        sums: list[Sums] = []
        if owners:
            sums = weighted_sums_multi(d.y, d.v, d.X, d.intercept, [t for _, t in owners],
                                       [solvers[i].mode for i, _ in owners], use_numba=use_numba)
            passes += 1
        fits: dict[int, list[est.GLS]] = {i: [] for i in pending}
        for (i, t), sm in zip(owners, sums, strict=True):
            head = solvers[i].head
            g = est.gls(sm if head is None else sm.head(head), t)
            fits[i].append(g)
            if head is None and pool is not None:
                pool.append((t, g))
        for i in list(pending):
            try:
                pending[i] = solvers[i].steps.send(fits[i])
            except StopIteration as stop:
                results[i] = stop.value
                del pending[i]
    return results, passes


def q_bound_steps(target: float, pool: list[tuple[float, est.GLS]], *, tol: float = Q_TOL,
                  max_iter: int = 200) -> Generator[list[float], list[est.GLS], tuple[float, bool, int]]:
    """The tau² >= 0 with ``Q(tau²) = target`` (``Q = y'Py`` decreases in tau²), as steps.

    ``pool`` holds fits of the full model, (0, fit at 0) among them; it grows as any
    solver sharing it evaluates. Returns ``(tau², converged, rounds)``; 0 when
    ``Q(0) <= target``.
    """
    h_target = 1.0 / target
    t_new = math.nan
    for it in range(1, max_iter + 1):
        lo, hi = 0.0, math.inf
        best: tuple[float, est.GLS] | None = None
        for t, g in pool:
            q = g.yPy
            if t == 0.0 and q <= target:
                return 0.0, True, it - 1
            if q == target:
                return t, True, it - 1
            if q > target:
                lo = max(lo, t)
            else:
                hi = min(hi, t)
            if best is None or abs(1.0 / q - h_target) < abs(1.0 / best[1].yPy - h_target):
                best = (t, g)
        assert best is not None  # the pool holds the fit at 0
        t, g = best
        if hi - lo <= tol * lo:
            return 0.5 * (lo + hi), True, it - 1
        dh = g.yPPy / g.yPy**2  # d(1/Q)/dtau² = y'PPy / Q²
        t_new = t + (h_target - 1.0 / g.yPy) / dh if dh > 0 else math.nan
        if abs(t_new - t) <= tol * t:  # (a zero step at a bound of the bracket included)
            return t_new, True, it - 1
        if not lo < t_new < hi:  # outside the bracket: bisect it (or double past lo)
            t_new = 0.5 * (lo + hi) if math.isfinite(hi) else 2.0 * lo + 1e-12
        yield [t_new]
    return t_new, False, max_iter


def qprofile_together(d: Any, *, level: float, g0: est.GLS, extra: list[Solver] | None = None,
                      pool: list[tuple[float, est.GLS]] | None = None, use_numba: bool = True
                      ) -> tuple[tuple[float, float], tuple[str, ...], list[Any], int]:
    """Both Q-profile bounds (and any ``extra`` solvers) in shared passes.

    Returns ``((lower, upper), notes, results of extra, passes)``.
    """
    from scipy import stats

    pool = [(0.0, g0)] if pool is None else pool
    df = d.k - d.p
    a = (1.0 - level) / 2.0
    targets = (float(stats.chi2.ppf(1 - a, df)), float(stats.chi2.ppf(a, df)))
    bounds = [Solver(q_bound_steps(q, pool), mode=0) for q in targets]
    extra = extra or []
    res, passes = run_together(d, [*extra, *bounds], use_numba=use_numba, pool=pool)
    (lo, ok_lo, _), (hi, ok_hi, _) = res[len(extra):]
    notes = () if ok_lo and ok_hi else (
        "The Q-profile bound did not converge; tau2_ci is approximate.",)
    return (lo, hi), notes, res[:len(extra)], passes


@dataclass(frozen=True)
class Request:
    """What a large fit computes alongside tau²: the interval at ``level``, R²'s base model."""

    level: float
    base: bool
    s0: Sums  # sums at tau² = 0 (the base model's start is their intercept part)


@dataclass
class Together:
    """tau², its Q-profile interval and the base model's tau², from shared passes."""

    main: est.TauFit
    ci: tuple[float, float]
    ci_notes: tuple[str, ...]
    base_tau2: float | None
    passes: int
    messages: list[str] = field(default_factory=list)


def request_for(d: Any, *, level: float, nested: Any, tau2: float | None,
                s0: Sums) -> Request | None:
    """What a fit of ``d`` solves alongside tau²: nothing below :data:`TOGETHER_MIN_K` effects.

    Large fits (and every fit over Dask arrays) of independent effects with an
    estimated tau² get the interval, and R²'s base model when there are moderators
    beside an intercept.
    """
    chunked = type(d.y).__module__.startswith("dask")  # a pass is a round of tasks
    if (d.k < TOGETHER_MIN_K and not chunked) or nested is not None or tau2 is not None:
        return None
    return Request(level, bool(moderator_positions(list(d.names))) and d.intercept, s0)


def can_share(label: str) -> bool:
    """Whether the estimator ``label`` runs as steps (envlink's REML and ML)."""
    return label in ESTIMATORS and resolve(ESTIMATORS[label]) in (est.tau2_reml, est.tau2_ml)


def fit_together(d: Any, label: str, request: Request, *, g0: est.GLS, tol: float,
                 max_iter: int, use_numba: bool = True) -> Together:
    """REML or ML tau², the Q-profile interval and the base model's tau², side by side.

    Examples
    --------
    >>> import numpy as np
    >>> from envlink.metareg.design import design_from_arrays
    >>> from envlink.metareg._kernels import weighted_sums
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=200)
    >>> d = design_from_arrays(0.2 * x + rng.normal(0, 0.4, 200), np.full(200, 0.1), x,
    ...                        intercept=True)
    >>> s0 = weighted_sums(d.y, d.v, d.X, True, 0.0)
    >>> t = fit_together(d, "REML", Request(0.95, True, s0), g0=est.gls(s0, 0.0),
    ...                  tol=1e-10, max_iter=100)
    >>> bool(t.ci[0] < t.main.tau2 < t.ci[1]), t.base_tau2 > t.main.tau2
    (True, True)
    """
    restricted = ESTIMATORS[label].info["likelihood"] == "restricted"
    k, p = d.k, d.p
    extra = [Solver(est.fisher_steps(k, p, label, restricted, est.dl_start(k, p, g0), tol,
                                     max_iter, est.tau2_scale(d, g0)))]
    if request.base:
        gb = est.gls(request.s0.head(1), 0.0)
        base_scale = (k - 1) / gb.trP if gb.trP > 0 else 1.0  # est.tau2_scale of the base model
        extra.append(Solver(est.fisher_steps(k, 1, label, restricted, est.dl_start(k, 1, gb), tol,
                                             max_iter, base_scale), mode=ALL | BASE, head=1))
    ci, notes, res, passes = qprofile_together(d, level=request.level, g0=g0, extra=extra,
                                               use_numba=use_numba)
    base = res[1].tau2 if request.base else None
    return Together(res[0], ci, notes, base, passes)
