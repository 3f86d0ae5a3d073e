"""Many multilevel meta-regressions at once: effects nested in studies, stacked designs.

The stacked counterpart of :func:`envlink.metareg.multilevel.fit_multilevel` for ``N``
designs that share the effects, variances and study labels and differ in their
moderator rows (permutations, scanned windows). Each study's marginal covariance
``V_i = D_i⁻¹ + σ²_between 1 1ᵀ`` (``D_i = diag(1 / (v + σ²_within))``) is inverted
by the Sherman-Morrison formula, with per-study sums taken by ``np.add.reduceat``
over rows sorted by study, so one step costs O(N k p²) array work and no loop over
designs. The two components are found by Newton steps on the (restricted)
log-likelihood with its exact gradient and the average-information matrix
(``½ uₐᵀ P u_b`` with ``u = V_a P y``; Gilmour, Thompson & Cullis 1995), components
held at 0 where the likelihood falls towards negative values, and steps halved
where the likelihood would decrease. Formulas and citations: docs/methods.md.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from envlink.metareg.stacked import StackedFits, _inv_sym, prepare

__all__ = ["fit_stacked_nested"]

_LOG2PI = float(np.log(2.0 * np.pi))


@dataclass
class _Layout:
    """Rows sorted by study: the effects, variances, codes and the studies' first rows."""

    order: np.ndarray
    y: np.ndarray
    v: np.ndarray
    codes: np.ndarray
    starts: np.ndarray

    def red(self, a: np.ndarray) -> np.ndarray:
        """Per-study sums along axis 1."""
        return np.add.reduceat(a, self.starts, axis=1)


@dataclass
class _State:
    """The likelihood's pieces of each design at its components."""

    theta: np.ndarray
    ll: np.ndarray
    beta: np.ndarray
    Ainv: np.ndarray
    yPy: np.ndarray
    singular: np.ndarray
    grad: np.ndarray
    hess: np.ndarray  # observed information 2 AI - F
    ai: np.ndarray  # average information


def _take(s: _State, idx: np.ndarray) -> _State:
    return _State(*(getattr(s, f.name)[idx] for f in fields(s)))


def _put(s: _State, idx: np.ndarray, new: _State) -> None:
    for f in fields(s):
        getattr(s, f.name)[idx] = getattr(new, f.name)


def _vinv(L: _Layout, d: np.ndarray, c: np.ndarray, u: np.ndarray) -> np.ndarray:
    """``V⁻¹ u`` for every design (Sherman-Morrison per study)."""
    return d * u - d * (c * L.red(d * u))[:, L.codes]


def _evaluate(L: _Layout, X: np.ndarray, m: np.ndarray, theta: np.ndarray,
              restricted: bool) -> _State:
    n, k, p = X.shape
    s1, s2 = theta[:, 0:1], theta[:, 1:2]
    vt = L.v[None, :] + s2
    d = m / vt
    s = L.red(d)
    den = 1.0 + s1 * s
    c = s1 / den
    dX = d[:, :, None] * X
    T = L.red(dX)
    ty = L.red(d * L.y)
    cT = c[:, :, None] * T
    A = dX.transpose(0, 2, 1) @ X - cT.transpose(0, 2, 1) @ T  # batched matmul: fastest here
    b = dX.transpose(0, 2, 1) @ L.y - np.einsum("nsp,ns->np", T, c * ty)
    yVy = d @ (L.y * L.y) - np.einsum("ns,ns->n", c, ty * ty)
    Ainv, logdetA, bad = _inv_sym(A)
    beta = np.einsum("npq,nq->np", Ainv, b)
    yPy = np.maximum(yVy - np.einsum("np,np->n", b, beta), 0.0)
    kk = m.sum(axis=1)
    logdetV = (m * np.log(vt)).sum(axis=1) + np.log(den).sum(axis=1)
    if restricted:
        ll = -0.5 * ((kk - p) * _LOG2PI + logdetV + logdetA + yPy)
    else:
        ll = -0.5 * (kk * _LOG2PI + logdetV + yPy)
    e = L.y[None, :] - (X @ beta[:, :, None])[:, :, 0]
    Py = _vinv(L, d, c, e)
    sPy = L.red(Py)
    W = _Weights(d, s, den, c, dX - d[:, :, None] * cT[:, L.codes], T / den[:, :, None], Ainv)
    F, tr_half = _expected_information(L, W, restricted)
    grad = 0.5 * np.stack([(sPy * sPy).sum(axis=1), (Py * Py).sum(axis=1)], axis=1) - tr_half
    ai = _average_information(L, X, W, m * sPy[:, L.codes], Py)
    return _State(theta, ll, beta, Ainv, yPy, bad, grad, 2.0 * ai - F, ai)


@dataclass
class _Weights:
    """The pieces of ``V⁻¹`` and ``P`` that the traces need (see :func:`_expected_information`)."""

    d: np.ndarray  # (n, k) 1 / (v + σ²_within), 0 for unused rows
    s: np.ndarray  # (n, S) per-study sums of d
    den: np.ndarray  # (n, S) 1 + σ²_between s
    c: np.ndarray  # (n, S) σ²_between / den
    Zx: np.ndarray  # (n, k, p) V⁻¹ X
    G: np.ndarray  # (n, S, p) rows of Zᵀ V⁻¹ X (Z: the study indicators)
    Ainv: np.ndarray  # (n, p, p) (Xᵀ V⁻¹ X)⁻¹


def _expected_information(L: _Layout, W: _Weights,
                          restricted: bool) -> tuple[np.ndarray, np.ndarray]:
    """``½ tr(P V_a P V_b)`` and ``½ tr(P V_a)`` (with ``V⁻¹`` for ``P`` under ML).

    ``V_between = Z Zᵀ`` (study indicators) and ``V_within = I``; with ``Zᵀ V⁻¹ Z =
    diag(s / den)``, ``V⁻¹ Z`` holding ``d / den`` in each study's rows, and ``P = V⁻¹ -
    V⁻¹ X A⁻¹ Xᵀ V⁻¹`` every trace reduces to sums over rows and studies and
    ``p × p`` products, so no ``k × k`` or ``S × S`` matrix is formed.
    """
    d, s, den, c, Zx, G, Ai = W.d, W.s, W.den, W.c, W.Zx, W.G, W.Ainv
    d2 = d * d
    r2, r3 = L.red(d2), L.red(d2 * d)
    sd = s / den
    tVV = (r2 - 2.0 * c * r3 + c * c * r2 * r2).sum(axis=1)  # tr(V⁻²)
    tVZ = (r2 / (den * den)).sum(axis=1)  # ‖V⁻¹ Z‖²
    tZZ = (sd * sd).sum(axis=1)  # ‖Zᵀ V⁻¹ Z‖²
    tr_b, tr_w = sd.sum(axis=1), d.sum(axis=1) - (c * r2).sum(axis=1)
    if restricted:
        GG = G.transpose(0, 2, 1) @ G
        ZZ = Zx.transpose(0, 2, 1) @ Zx
        R = L.red(d[:, :, None] * Zx)
        ZVZ = (d[:, :, None] * Zx).transpose(0, 2, 1) @ Zx - (c[:, :, None] * R).transpose(0, 2, 1) @ R
        AG, AZ = Ai @ GG, Ai @ ZZ
        tVV += -2.0 * np.einsum("npq,nqp->n", Ai, ZVZ) + np.einsum("npq,nqp->n", AZ, AZ)
        tVZ += (-2.0 * np.einsum("nsp,npq,nsq->n", R / den[:, :, None], Ai, G, optimize=True)
                + np.einsum("npq,nqp->n", AZ, AG))
        tZZ += (-2.0 * np.einsum("ns,nsp,npq,nsq->n", sd, G, Ai, G, optimize=True)
                + np.einsum("npq,nqp->n", AG, AG))
        tr_b = tr_b - np.einsum("npq,nqp->n", Ai, GG)
        tr_w = tr_w - np.einsum("npq,nqp->n", Ai, ZZ)
    F = np.empty((d.shape[0], 2, 2))
    F[:, 0, 0], F[:, 1, 1] = 0.5 * tZZ, 0.5 * tVV
    F[:, 0, 1] = F[:, 1, 0] = 0.5 * tVZ
    return F, 0.5 * np.stack([tr_b, tr_w], axis=1)


def _average_information(L: _Layout, X: np.ndarray, W: _Weights, ub: np.ndarray,
                         uw: np.ndarray) -> np.ndarray:
    """``½ uₐᵀ P u_b`` with ``u_a = V_a P y`` for the two components."""
    vb, vw = _vinv(L, W.d, W.c, ub), _vinv(L, W.d, W.c, uw)
    H = np.empty((W.d.shape[0], 2, 2))
    xb = (vb[:, None, :] @ X)[:, 0]
    xw = (vw[:, None, :] @ X)[:, 0]
    H[:, 0, 0] = np.einsum("nk,nk->n", vb, ub) - np.einsum("np,npq,nq->n", xb, W.Ainv, xb)
    H[:, 1, 1] = np.einsum("nk,nk->n", vw, uw) - np.einsum("np,npq,nq->n", xw, W.Ainv, xw)
    H[:, 0, 1] = H[:, 1, 0] = (np.einsum("nk,nk->n", vb, uw)
                               - np.einsum("np,npq,nq->n", xb, W.Ainv, xw))
    return 0.5 * H


def _newton_step(st: _State) -> tuple[np.ndarray, np.ndarray]:
    """Projected Newton step on the components and whether the design is at its optimum."""
    g, th = st.grad, st.theta
    H = st.hess
    det_h = H[:, 0, 0] * H[:, 1, 1] - H[:, 0, 1] ** 2
    use_ai = ~((H[:, 0, 0] > 0) & (H[:, 1, 1] > 0) & (det_h > 0))  # not concave here: AI steps
    H = np.where(use_ai[:, None, None], st.ai, H)
    fixed = (th <= 0.0) & (g <= 0.0)
    step = np.zeros_like(th)
    both = ~fixed[:, 0] & ~fixed[:, 1]
    det = H[:, 0, 0] * H[:, 1, 1] - H[:, 0, 1] ** 2
    ok2 = both & (det > 1e-300 * np.maximum(1.0, np.abs(H[:, 0, 0] * H[:, 1, 1])))
    with np.errstate(invalid="ignore", divide="ignore"):
        step[:, 0] = np.where(ok2, (H[:, 1, 1] * g[:, 0] - H[:, 0, 1] * g[:, 1]) / det, 0.0)
        step[:, 1] = np.where(ok2, (H[:, 0, 0] * g[:, 1] - H[:, 0, 1] * g[:, 0]) / det, 0.0)
        for j in range(2):  # one free component (or a singular 2 x 2): a 1-D Newton step
            one = ~fixed[:, j] & ~ok2
            step[:, j] = np.where(one & (H[:, j, j] > 0), g[:, j] / H[:, j, j], step[:, j])
    return np.where(fixed, 0.0, step), np.asarray(fixed.all(axis=1))


def _iterate(L: _Layout, X: np.ndarray, m: np.ndarray, st: _State, restricted: bool,
             tol: float, max_iter: int) -> np.ndarray:
    """Newton iterations on the designs not yet converged; ``st`` is updated in place.

    A design is converged when its next step would change neither component by more
    than ``tol`` relative to the larger (or when both sit at 0 with the likelihood
    falling beyond): its current state is kept.
    """
    n = st.theta.shape[0]
    done = st.singular.copy()
    floor = 1e-3 * max(float(np.var(L.y)), 1e-8)
    for _ in range(max_iter):
        act = np.flatnonzero(~done)
        if not act.size:
            break
        cur = _take(st, act)
        step, optimum = _newton_step(cur)
        new = np.maximum(cur.theta + step, 0.0)
        size = np.maximum(new.max(axis=1), floor)
        small = optimum | (np.abs(new - cur.theta).max(axis=1) <= tol * size)
        done[act[small]] = True
        if small.all():
            break
        move = np.flatnonzero(~small)
        act, cur, new = act[move], _take(cur, move), new[move]
        Xa, ma = (X, m) if act.size == n else (X[act], m[act])
        nxt = _evaluate(L, Xa, ma, new, restricted)
        for _h in range(30):  # halve the steps that lowered the likelihood
            worse = np.flatnonzero(nxt.ll < cur.ll - 1e-12 * np.maximum(1.0, np.abs(cur.ll)))
            if not worse.size:
                break
            half = np.maximum((cur.theta[worse] + nxt.theta[worse]) / 2.0, 0.0)
            _put(nxt, worse, _evaluate(L, Xa[worse], ma[worse], half, restricted))
        _put(st, act, nxt)
        done[act[nxt.singular]] = True
    return done


def fit_stacked_nested(y: np.ndarray, v: np.ndarray, X: np.ndarray, codes: np.ndarray, *,
                       method: str = "REML", start: np.ndarray | None = None,
                       tol: float = 1e-9, max_iter: int = 100,
                       compiled: bool = False) -> StackedFits:
    """Fit the two-component multilevel model to each of ``N`` stacked designs.

    Parameters
    ----------
    y, v : (k,) arrays
        Effects and sampling variances, shared by every design.
    X : (N, k, p) array
        The full designs; a row with a non-finite value is left out of that design.
    codes : (k,) array
        Study of each row (any labels).
    method : {"REML", "ML"}
    start : (2,) or (N, 2) array, optional
        Starting ``(between, within)`` components (default: the first design is
        fitted from a tenth of the effects' variance each, the others from its fit).
    tol, max_iter : float, int
        Convergence on the change of the components relative to the larger one.
    compiled : bool, default False
        Use the compiled kernel (:mod:`envlink.metareg._nested_kernel`) where numba
        is available: the same iterations, several times faster on large stacks,
        compiled once and cached.

    Returns
    -------
    StackedFits
        With ``sigma2`` (N, 2) and ``tau2`` their sum.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> codes = np.repeat(np.arange(20), 3)
    >>> y = rng.normal(0, 0.3, 20)[codes] + rng.normal(0, 0.2, 60)
    >>> f = fit_stacked_nested(y, np.full(60, 0.01), np.ones((1, 60, 1)), codes)
    >>> bool(f.converged[0]), bool(f.sigma2[0, 0] > f.sigma2[0, 1])
    (True, True)
    """
    from envlink.metareg._nested_kernel import fit_many, use_kernel

    X, m = prepare(X)
    n, k, p = X.shape
    dense = np.unique(np.asarray(codes), return_inverse=True)[1].reshape(-1)
    order = np.argsort(dense, kind="stable")
    sc = dense[order]
    starts = np.concatenate([[0], np.flatnonzero(np.diff(sc)) + 1])
    y = np.asarray(y, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    L = _Layout(order, y[order], v[order], sc, starts)
    Xs, ms = X[:, order], m[:, order]
    restricted = method != "ML"
    if start is None:  # the first design from a tenth of the variance each, the others from it
        first = np.full((1, 2), 0.1 * max(float(np.var(L.y)), 1e-8))
        one = _evaluate(L, Xs[:1], ms[:1], first, restricted)
        _iterate(L, Xs[:1], ms[:1], one, restricted, tol, max_iter)
        start = one.theta[0] if np.isfinite(one.theta).all() else first[0]
    theta = np.maximum(np.broadcast_to(np.asarray(start, dtype=np.float64), (n, 2)), 0.0)
    kk = ms.sum(axis=1)
    if compiled and use_kernel():
        theta, beta, Ainv, yPy, ll, done, bad = fit_many(y, v, dense, X, m, theta,
                                                          restricted=restricted, tol=tol,
                                                          max_iter=max_iter)
    else:
        st = _evaluate(L, Xs, ms, theta.copy(), restricted)
        done = _iterate(L, Xs, ms, st, restricted, tol, max_iter)
        theta, beta, Ainv, yPy, ll, bad = st.theta, st.beta, st.Ainv, st.yPy, st.ll, st.singular
    bad = bad | (kk <= p)
    nan = np.where(bad, np.nan, 1.0)
    return StackedFits(beta * nan[:, None], Ainv * nan[:, None, None], theta.sum(axis=1),
                       theta, yPy * nan, ll * nan, kk, done & ~bad, bad)
