"""Estimators of the residual heterogeneity tau² for independent effects.

All work from one-pass weighted sums (:mod:`envlink.metareg._kernels`), so memory
stays O(k) and each iteration reads the data once. Formulas and citations are in
docs/methods.md.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from scipy import optimize

from envlink.errors import ModelError
from envlink.metareg._kernels import Sums, weighted_sums

__all__ = ["Method", "GLS", "gls", "estimate_tau2", "solve_q", "TauFit", "METHODS", "checked_sums"]

Method = Literal["REML", "ML", "DL", "PM", "HE", "SJ"]
METHODS = ("REML", "ML", "DL", "PM", "HE", "SJ")


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


def loglik(g: GLS, k: int, p: int, method: str) -> float:
    """Log-likelihood (ML) or restricted log-likelihood (REML) at ``g.tau2``."""
    if method == "ML":
        return -0.5 * (k * np.log(2 * np.pi) + g.slog + g.yPy)
    return -0.5 * ((k - p) * np.log(2 * np.pi) + g.slog + g.logdetA + g.yPy)


def _score(g: GLS, method: str) -> float:
    """Derivative of the (restricted) log-likelihood with respect to tau²."""
    return 0.5 * (g.yPPy - (g.sw if method == "ML" else g.trP))


def _score_step(g: GLS, method: str) -> float:
    if method == "ML":
        return (g.yPPy - g.sw) / g.sw2
    return (g.yPPy - g.trP) / g.trPP


def _fisher(d: Any, method: str, start: float, tol: float, max_iter: int,
            use_numba: bool) -> TauFit:
    k, p = d.k, d.p
    t = max(start, 0.0)
    g = gls(sums_at(d, t, use_numba), t)
    ll = loglik(g, k, p, method)
    msgs: list[str] = []
    prev: tuple[float, float] | None = None  # (tau², score) of the previous iterate
    for it in range(1, max_iter + 1):
        step = _score_step(g, method)
        sc = _score(g, method)
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
        g_new = gls(sums_at(d, new, use_numba), new)
        ll_new = loglik(g_new, k, p, method)
        tries = 0
        while ll_new < ll - 1e-12 * max(1.0, abs(ll)) and tries < 30:  # halve on decrease
            step /= 2.0
            new = t + step
            g_new = gls(sums_at(d, new, use_numba), new)
            ll_new = loglik(g_new, k, p, method)
            tries += 1
        change = abs(new - t)
        t, g, ll = new, g_new, ll_new
        if change <= tol * max(1.0, t):
            return TauFit(t, True, it, msgs, g)
    msgs.append(
        f"{method} did not converge in {max_iter} iterations (last tau² = {t:.6g}); "
        "increase max_iter, or use method='DL' or 'PM', which need no iteration of this kind."
    )
    return TauFit(t, False, max_iter, msgs, g)


def solve_q(d: Any, target: float, *, tol: float, max_iter: int, use_numba: bool = True,
            g0: GLS | None = None) -> tuple[float, bool, int]:
    """Solve ``Q(tau²) = target`` for tau² ≥ 0, ``Q`` the weighted residual sum of squares.

    ``Q`` decreases in tau²; returns 0 when ``Q(0) <= target``. Newton steps from the
    left (the derivative is ``-y'PPy``) with a bracketing fallback.
    """
    g = g0 if g0 is not None else gls(sums_at(d, 0.0, use_numba), 0.0)
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
        if change <= tol * max(1.0, t):
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


def estimate_tau2(d: Any, method: str, *, tol: float = 1e-10, max_iter: int = 100,
                  use_numba: bool = True, g0: GLS | None = None) -> TauFit:
    """Estimate tau² by one of :data:`METHODS`.

    Parameters
    ----------
    d : Design
        Effects, variances and moderators.
    method : {"REML", "ML", "DL", "PM", "HE", "SJ"}
    tol, max_iter : float, int
        Convergence on the relative change of tau² and the iteration limit.
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
    """
    k, p = d.k, d.p
    if g0 is None:
        g0 = gls(sums_at(d, 0.0, use_numba), 0.0)
    # DerSimonian-Laird in its meta-regression form (the starting value of REML and ML)
    dl = max(0.0, (g0.yPy - (k - p)) / g0.trP) if g0.trP > 0 else 0.0
    if method == "DL":
        return TauFit(dl, True, 0)
    if method in ("REML", "ML"):
        return _fisher(d, method, dl, tol, max_iter, use_numba)
    if method == "PM":
        t, ok, it = solve_q(d, float(k - p), tol=tol, max_iter=max_iter, use_numba=use_numba,
                            g0=g0)
        msgs = [] if ok else [f"Paule-Mandel did not converge in {max_iter} iterations."]
        return TauFit(t, ok, it, msgs)
    if method in ("HE", "SJ"):
        XtX, Xty, yy, sv, XtVX = _ols_pass(d)
        XtXinv = np.linalg.inv(XtX)
        rss = max(0.0, yy - Xty @ XtXinv @ Xty)
        if method == "HE":
            t = (rss - (sv - np.trace(XtXinv @ XtVX))) / (k - p)
            return TauFit(max(0.0, float(t)), True, 0)
        t0 = rss / k
        if t0 <= 0.0:
            return TauFit(0.0, True, 0, ["All residuals are zero; Sidik-Jonkman gives tau² = 0."])
        q0 = gls(sums_at(d, t0, use_numba), t0).yPy
        return TauFit(float(t0 * q0 / (k - p)), True, 1)
    raise ModelError(f"Unknown tau² method {method!r}; use one of {', '.join(METHODS)}.")


def checked_sums(d: Any, un: bool = True) -> Sums:
    """Sums at tau² = 0 with a check that the moderators are not collinear or constant."""
    s = sums_at(d, 0.0, un)
    A = s.A
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
