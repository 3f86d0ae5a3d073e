"""Estimators of the residual heterogeneity tau² for independent effects.

All work from one-pass weighted sums (:mod:`envlink.metareg._kernels`), so memory
stays O(k) and each iteration reads the data once. Formulas and citations are in
docs/methods.md.
"""

from __future__ import annotations

from collections.abc import Generator
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize

from envlink.errors import ModelError
from envlink.metareg._kernels import Sums, weighted_sums, weighted_sums_multi
from envlink.metareg.vocabulary import ESTIMATORS, resolve

__all__ = ["GLS", "gls", "estimate_tau2", "solve_q", "tau2_scale", "TauFit", "checked_sums", "tau2_reml",
           "tau2_ml", "tau2_dl", "tau2_pm", "tau2_he", "tau2_sj",
           "Steps", "fisher_steps", "run_steps", "dl_start"]


@dataclass
class GLS:
    """Generalised least squares at one tau², from one pass of sums."""

    tau2: float
    beta: np.ndarray
    Ainv: np.ndarray  # (X'WX)^-1, the model-based covariance of beta
    yPy: float  # weighted residual sum of squares
    trP: float
    yPPy: float
    trPP: float
    logdetA: float
    sw: float
    sw2: float
    slog: float


def gls(s: Sums, tau2: float) -> GLS:
    """Solve the weighted normal equations from sums (``p`` is tiny: dense algebra)."""
    A = s.A
    try:
        L = np.linalg.cholesky(A)
    except np.linalg.LinAlgError:
        raise ModelError(
            "The weighted moderator matrix is singular: moderators are collinear or constant."
        ) from None
    Linv = np.linalg.inv(L)
    Ainv = Linv.T @ Linv
    beta = Ainv @ s.b1
    yPy = s.syy1 - s.b1 @ beta
    AB = Ainv @ s.B
    trP = s.sw - np.trace(AB)
    yPPy = s.syy2 - 2.0 * beta @ s.b2 + beta @ s.B @ beta
    trPP = s.sw2 - 2.0 * np.trace(Ainv @ s.C) + np.trace(AB @ AB)
    logdet = 2.0 * float(np.sum(np.log(np.diag(L))))
    if s.yshift:  # sums of y - c with an intercept: only the intercept moves
        beta = beta.copy()
        beta[0] += s.yshift
    if s.shift is not None:  # sums of x - c: beta = S'beta_c, cov = S' cov_c S (det S = 1)
        St = np.eye(A.shape[0])
        St[0, 1:] = -s.shift
        beta = St @ beta
        Ainv = St @ Ainv @ St.T
    return GLS(tau2, beta, Ainv, max(float(yPy), 0.0), float(trP), max(float(yPPy), 0.0),
               float(trPP), logdet, s.sw, s.sw2, s.slog)


def sums_at(d: Any, tau2: float, use_numba: bool = True) -> Sums:
    """One pass of weighted sums at ``tau2`` over a design."""
    return weighted_sums(d.y, d.v, d.X, d.intercept, tau2, use_numba=use_numba)


@dataclass
class TauFit:
    """A tau² estimate with its convergence record."""

    tau2: float
    converged: bool = True
    n_iter: int = 0
    messages: list[str] = field(default_factory=list)
    fit: GLS | None = None  # GLS at the estimate when the estimator computed it


def tau2_scale(d: Any, g0: GLS) -> float:
    """The scale a tau² step is judged against near 0: the typical sampling variance.

    ``(k − p) / tr P₀`` (docs/methods.md, "Heterogeneity"); 1 when undefined. A step
    has converged when ``|Δτ²| ≤ tol · max(τ², scale)``: relative to τ², and relative to
    the sampling variances where τ² is near 0 (an absolute floor would stop early when
    the variances are tiny).
    """
    scale = (d.k - d.p) / g0.trP if g0.trP > 0 else 1.0
    return scale if np.isfinite(scale) and scale > 0 else 1.0


def loglik(g: GLS, k: int, p: int, restricted: bool) -> float:
    """Restricted (REML) or full (ML) log-likelihood at ``g.tau2``."""
    if not restricted:
        return -0.5 * (k * np.log(2 * np.pi) + g.slog + g.yPy)
    return -0.5 * ((k - p) * np.log(2 * np.pi) + g.slog + g.logdetA + g.yPy)


def _score(g: GLS, restricted: bool) -> float:
    """Derivative of the (restricted) log-likelihood with respect to tau²."""
    return 0.5 * (g.yPPy - (g.trP if restricted else g.sw))


def _score_step(g: GLS, restricted: bool) -> float:
    if not restricted:
        return (g.yPPy - g.sw) / g.sw2
    return (g.yPPy - g.trP) / g.trPP


#: the steps of an iterative solver: it yields the tau² values it needs next and is sent
#: the fits (:class:`GLS`) there; its return value is the result. Several solvers can so
#: share one pass over the data (:mod:`envlink.metareg.lockstep`).
Steps = Generator[list[float], list[GLS], Any]


def fisher_steps(k: int, p: int, name: str, restricted: bool, start: float, tol: float,
                 max_iter: int, scale: float = 1.0) -> Generator[list[float], list[GLS], TauFit]:
    """Fisher scoring (with secant steps and step halving) for REML or ML, as :data:`Steps`.

    Converged when ``|Δτ²| ≤ tol · max(τ², scale)``, ``scale`` the typical sampling
    variance (:func:`tau2_scale`).
    """
    t = max(start, 0.0)
    (g,) = yield [t]
    ll = loglik(g, k, p, restricted)
    msgs: list[str] = []
    prev: tuple[float, float] | None = None  # (tau², score) of the previous iterate
    for it in range(1, max_iter + 1):
        step = _score_step(g, restricted)
        sc = _score(g, restricted)
        if t <= 0.0 and step <= 0.0:
            return TauFit(0.0, True, it, msgs, g)
        if prev is not None and t != prev[0] and sc != prev[1]:
            slope = (sc - prev[1]) / (t - prev[0])
            if slope < 0:
                # Fisher steps overshoot (or creep) when expected and observed information
                # differ; the secant of the score is a Newton step on observed curvature
                step = -sc / slope
        prev = (t, sc)
        new = t + step
        if new < 0.0:  # truncate at the boundary; halving below keeps the likelihood rising
            step = -t
            new = 0.0
        (g_new,) = yield [new]
        ll_new = loglik(g_new, k, p, restricted)
        tries = 0
        while ll_new < ll - 1e-12 * max(1.0, abs(ll)) and tries < 30:  # halve on decrease
            step /= 2.0
            new = t + step
            (g_new,) = yield [new]
            ll_new = loglik(g_new, k, p, restricted)
            tries += 1
        change = abs(new - t)
        t, g, ll = new, g_new, ll_new
        if change <= tol * max(scale, t):
            return TauFit(t, True, it, msgs, g)
    msgs.append(
        f"{name} did not converge in {max_iter} iterations (last tau² = {t:.6g}); "
        "increase max_iter, or use method='DL' or 'PM', which need no iteration of this kind."
    )
    return TauFit(t, False, max_iter, msgs, g)


def run_steps(d: Any, steps: Steps, use_numba: bool = True) -> Any:
    """Run one solver's :data:`Steps` alone, one pass over ``d`` per request."""
    try:
        ts = next(steps)
        while True:
            ss = weighted_sums_multi(d.y, d.v, d.X, d.intercept, ts, None, use_numba=use_numba)
            ts = steps.send([gls(s, t) for s, t in zip(ss, ts, strict=True)])
    except StopIteration as stop:
        return stop.value


def _fisher(d: Any, name: str, restricted: bool, start: float, tol: float, max_iter: int,
            use_numba: bool, scale: float = 1.0) -> TauFit:
    return run_steps(d, fisher_steps(d.k, d.p, name, restricted, start, tol, max_iter, scale),
                     use_numba)


def solve_q(d: Any, target: float, *, tol: float, max_iter: int, use_numba: bool = True,
            g0: GLS | None = None) -> tuple[float, bool, int]:
    """Solve ``Q(tau²) = target`` for tau² ≥ 0, ``Q`` the weighted residual sum of squares.

    ``Q`` decreases in tau²; returns 0 when ``Q(0) <= target``. Newton steps from the
    left (the derivative is ``-y'PPy``) with a bracketing fallback.
    """
    g = g0 if g0 is not None else gls(sums_at(d, 0.0, use_numba), 0.0)
    scale = tau2_scale(d, g)
    if g.yPy <= target:
        return 0.0, True, 0
    lo, t = 0.0, 0.0
    for it in range(1, max_iter + 1):
        if g.yPPy <= 0:
            break
        new = t + (g.yPy - target) / g.yPPy
        g_new = gls(sums_at(d, new, use_numba), new)
        if g_new.yPy < target:  # overshot: the root is bracketed, finish with Brent
            f = lambda x: gls(sums_at(d, x, use_numba), x).yPy - target  # noqa: E731
            root, res = optimize.brentq(f, max(lo, t), new, xtol=1e-15, rtol=4 * np.finfo(float).eps,
                                        full_output=True, maxiter=max_iter)
            return float(root), bool(res.converged), it + res.iterations
        lo = new
        change = abs(new - t)
        t, g = new, g_new
        if change <= tol * max(scale, t):
            return t, True, it
    return t, False, max_iter


def _ols_pass(d: Any) -> tuple[np.ndarray, np.ndarray, float, float, np.ndarray]:
    """X'X, X'y, y'y, Σv and X'VX in blocks (for the Hedges and Sidik-Jonkman estimators)."""
    from envlink.metareg._kernels import BLOCK_ROWS

    p = d.p
    XtX = np.zeros((p, p))
    Xty = np.zeros(p)
    XtVX = np.zeros((p, p))
    yy = 0.0
    sv = 0.0
    dask_in = type(d.y).__module__.startswith("dask")
    for lo in range(0, d.k, BLOCK_ROWS):
        sl = slice(lo, lo + BLOCK_ROWS)
        yb, vb, xb = d.y[sl], d.v[sl], d.X[sl]
        if dask_in:
            import dask

            yb, vb, xb = dask.compute(yb, vb, xb)
        yb = np.asarray(yb, dtype=np.float64)
        vb = np.asarray(vb, dtype=np.float64)
        xb = np.asarray(xb, dtype=np.float64)
        if d.intercept:
            xb = np.column_stack([np.ones(yb.shape[0]), xb])
        XtX += xb.T @ xb
        Xty += xb.T @ yb
        XtVX += xb.T @ (xb * vb[:, None])
        yy += float(yb @ yb)
        sv += float(vb.sum())
    return XtX, Xty, yy, sv, XtVX


def dl_start(k: int, p: int, g0: GLS) -> float:
    """DerSimonian-Laird in its meta-regression form (also the start of REML and ML)."""
    return max(0.0, (g0.yPy - (k - p)) / g0.trP) if g0.trP > 0 else 0.0


def _dl(d: Any, g0: GLS) -> float:
    return dl_start(d.k, d.p, g0)


def tau2_reml(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """REML by Fisher scoring (with secant steps) from DerSimonian-Laird."""
    return _fisher(d, "REML", True, _dl(d, g0), tol, max_iter, use_numba, tau2_scale(d, g0))


def tau2_ml(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """ML by Fisher scoring (with secant steps) from DerSimonian-Laird."""
    return _fisher(d, "ML", False, _dl(d, g0), tol, max_iter, use_numba, tau2_scale(d, g0))


def tau2_dl(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """DerSimonian-Laird: ``max(0, (Q_E - (k - p)) / tr P0)``."""
    return TauFit(_dl(d, g0), True, 0)


def tau2_pm(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """Paule-Mandel: the tau² >= 0 solving ``y'P(tau²)y = k - p``."""
    t, ok, it = solve_q(d, float(d.k - d.p), tol=tol, max_iter=max_iter, use_numba=use_numba,
                        g0=g0)
    msgs = [] if ok else [f"Paule-Mandel did not converge in {max_iter} iterations."]
    return TauFit(t, ok, it, msgs)


def _ols_rss(d: Any) -> tuple[float, float, float]:
    """OLS residual sum of squares, ``Σ v`` and ``tr((X'X)^-1 X'VX)``."""
    XtX, Xty, yy, sv, XtVX = _ols_pass(d)
    XtXinv = np.linalg.inv(XtX)
    rss = max(0.0, yy - Xty @ XtXinv @ Xty)
    return rss, sv, float(np.trace(XtXinv @ XtVX))


def tau2_he(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """Hedges: ``max(0, (e'e - (Σ v - tr((X'X)^-1 X'VX))) / (k - p))`` from OLS residuals."""
    rss, sv, trv = _ols_rss(d)
    t = (rss - (sv - trv)) / (d.k - d.p)
    return TauFit(max(0.0, float(t)), True, 0)


def tau2_sj(d: Any, *, g0: GLS, tol: float, max_iter: int, use_numba: bool) -> TauFit:
    """Sidik-Jonkman: ``t0 · y'P(t0)y / (k - p)`` with ``t0 = e'e / k`` from OLS residuals."""
    rss, _, _ = _ols_rss(d)
    t0 = rss / d.k
    if t0 <= 0.0:
        return TauFit(0.0, True, 0, ["All residuals are zero; Sidik-Jonkman gives tau² = 0."])
    q0 = gls(sums_at(d, t0, use_numba), t0).yPy
    return TauFit(float(t0 * q0 / (d.k - d.p)), True, 1)


def estimate_tau2(d: Any, method: str, *, tol: float = 1e-10, max_iter: int = 100,
                  use_numba: bool = True, g0: GLS | None = None) -> TauFit:
    """Estimate tau² by one of the estimators of :data:`~envlink.metareg.vocabulary.ESTIMATORS`.

    Parameters
    ----------
    d : Design
        Effects, variances and moderators.
    method : str
        A name of :data:`~envlink.metareg.vocabulary.ESTIMATORS` (``"REML"``, ``"ML"``,
        ``"DL"``, ``"PM"``, ``"HE"``, ``"SJ"`` or an alias, any case).
    tol, max_iter : float, int
        Convergence on the change of tau² relative to ``max(tau², typical sampling
        variance)`` (:func:`tau2_scale`) and the iteration limit.
    g0 : GLS, optional
        The fit at tau² = 0, when already computed.

    Returns
    -------
    TauFit

    Examples
    --------
    >>> import numpy as np
    >>> from envlink.metareg.design import design_from_arrays
    >>> d = design_from_arrays([0.0, 1.0, 2.0], [0.5, 0.5, 0.5], None, intercept=True)
    >>> round(estimate_tau2(d, "DL").tau2, 6)   # Q = 4, df = 2, c = 6 - 2 = 4 -> 0.5
    0.5
    >>> round(estimate_tau2(d, "dersimonian-laird").tau2, 6)
    0.5
    """
    rule = resolve(ESTIMATORS.parse(method).entry)
    if g0 is None:
        g0 = gls(sums_at(d, 0.0, use_numba), 0.0)
    return rule(d, g0=g0, tol=tol, max_iter=max_iter, use_numba=use_numba)


def checked_sums(d: Any, un: bool = True) -> Sums:
    """Sums at tau² = 0 with a check that the moderators are not collinear or constant."""
    s = sums_at(d, 0.0, un)
    A = s.A
    if s.shift is not None:  # the check reads the moderators as given: A = S⁻¹ A_c S⁻ᵀ
        Si = np.eye(A.shape[0])
        Si[1:, 0] = s.shift
        A = Si @ A @ Si.T
    dg = np.diag(A)
    names = d.names
    from envlink.metareg.design import INTERCEPT

    for j in range(len(names)):
        if dg[j] <= 0:
            raise ModelError(f"Moderator term {names[j]!r} is zero in every row; remove it.")
    D = 1.0 / np.sqrt(dg)
    R = A * D[:, None] * D[None, :]
    for j in range(1, len(names)):
        sub = R[:j, :j]
        r = R[:j, j]
        resid = 1.0 - r @ np.linalg.solve(sub, r)
        if resid < 1e-10:
            constant = names[0] == INTERCEPT and abs(1.0 - R[0, j] ** 2) < 1e-10
            what = ("constant (it adds nothing beside the intercept)" if constant
                    else "a linear combination of earlier terms")
            raise ModelError(
                f"Moderator term {names[j]!r} is {what}: the moderators are collinear. "
                f"Remove it or merge categories (terms: {', '.join(names)})."
            )
    return s
