"""Multilevel meta-regression: effects nested in studies, two variance components.

Model (Konstantopoulos 2011): ``y_ij = x_ijᵀ β + u_i + e_ij + ε_ij`` with
``u_i ~ N(0, σ²_between)``, ``e_ij ~ N(0, σ²_within)`` and ``ε_ij ~ N(0, v_ij)``.
Each study's marginal covariance ``V_i = D_i⁻¹ + σ²_between 1 1ᵀ`` (``D_i`` the
diagonal of ``1 / (v + σ²_within)``) is inverted by the Sherman-Morrison formula,
so the (restricted) likelihood and its gradient cost O(k) per evaluation and no
k×k (or even per-study) matrix is formed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from envlink.errors import ModelError
from envlink.metareg.vocabulary import ESTIMATORS, multilevel_names

__all__ = ["MultilevelFit", "fit_multilevel", "study_blocks"]


@dataclass
class MultilevelFit:
    """Estimates of a two-component multilevel model."""

    sigma2: np.ndarray  # (between, within)
    beta: np.ndarray
    vcov: np.ndarray
    yPy: float
    loglik: float
    converged: bool
    n_iter: int
    message: str


def _parts(theta: np.ndarray, y: np.ndarray, v: np.ndarray, X: np.ndarray, codes: np.ndarray,
           S: int, restricted: bool, grad: bool):
    s1, s2 = float(theta[0]), float(theta[1])
    d = 1.0 / (v + s2)
    s = np.bincount(codes, d, minlength=S)
    den = 1.0 + s1 * s
    c = s1 / den
    T = np.column_stack([np.bincount(codes, d * X[:, j], minlength=S) for j in range(X.shape[1])])
    ty = np.bincount(codes, d * y, minlength=S)
    A = (X * d[:, None]).T @ X - T.T @ (T * c[:, None])
    b = (X * d[:, None]).T @ y - T.T @ (c * ty)
    yVy = float(d @ (y * y) - c @ (ty * ty))
    try:
        L = np.linalg.cholesky(A)
    except np.linalg.LinAlgError:
        raise ModelError("The moderators are collinear in the multilevel model.") from None
    Ainv = np.linalg.inv(A)
    beta = Ainv @ b
    yPy = max(yVy - float(b @ beta), 0.0)
    logdetV = float(np.log(v + s2).sum() + np.log(den).sum())
    logdetA = 2.0 * float(np.log(np.diag(L)).sum())
    if restricted:
        ll = -0.5 * ((len(y) - X.shape[1]) * np.log(2 * np.pi) + logdetV + logdetA + yPy)
    else:
        ll = -0.5 * (len(y) * np.log(2 * np.pi) + logdetV + yPy)
    if not grad:
        return ll, None, beta, Ainv, yPy
    e = y - X @ beta
    de = np.bincount(codes, d * e, minlength=S)
    Py = d * e - (c * de)[codes] * d
    q2 = float(Py @ Py)
    q1 = float(np.sum((de / den) ** 2))
    trVinv = float(d.sum() - c @ np.bincount(codes, d * d, minlength=S))
    tr1 = float(np.sum(s / den))
    if not restricted:
        t1, t2 = tr1, trVinv
    else:
        Z = X * d[:, None] - (T * c[:, None])[codes] * d[:, None]
        t2 = trVinv - float(np.trace(Ainv @ (Z.T @ Z)))
        G = T / den[:, None]
        t1 = tr1 - float(np.einsum("ip,pq,iq->", G, Ainv, G))
    g = 0.5 * np.array([q1 - t1, q2 - t2])  # d loglik / d(σ²_between, σ²_within)
    return ll, g, beta, Ainv, yPy


def fit_multilevel(y: np.ndarray, v: np.ndarray, X: np.ndarray, codes: np.ndarray, *,
                   method: str = "REML", start: float = 0.01, tol: float = 1e-10,
                   max_iter: int = 100) -> MultilevelFit:
    """Fit the two-component model by REML or ML (bounded quasi-Newton, exact gradient).

    Parameters
    ----------
    y, v : (k,) arrays
    X : (k, p) array, the full design with the intercept column
    codes : (k,) int array, study codes 0..S-1
    method : str
        An estimator of :data:`~envlink.metareg.vocabulary.ESTIMATORS` usable with the
        multilevel model (``"REML"`` or ``"ML"``, any spelling).
    start : float
        Starting total heterogeneity (split equally between the components).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> codes = np.repeat(np.arange(20), 3)
    >>> y = rng.normal(0, 0.3, 20)[codes] + rng.normal(0, 0.2, 60) + rng.normal(0, 0.1, 60)
    >>> f = fit_multilevel(y, np.full(60, 0.01), np.ones((60, 1)), codes)
    >>> f.converged, bool(f.sigma2[0] > f.sigma2[1])
    (True, True)
    """
    entry = ESTIMATORS.parse(method).entry
    if not entry.info.get("multilevel"):
        raise ModelError(f"Multilevel models are fitted by {multilevel_names()}; got method "
                         f"{method!r}.")
    restricted = entry.info["likelihood"] == "restricted"
    S = int(codes.max()) + 1
    scale = max(float(np.var(y)), 1e-8)

    def fun(z: np.ndarray):
        ll, g, *_ = _parts(z * scale, y, v, X, codes, S, restricted, True)
        return -ll, -g * scale

    x0 = np.full(2, max(start, 1e-4 * scale) / 2.0 / scale)
    res = optimize.minimize(fun, x0, jac=True, method="L-BFGS-B", bounds=[(0, None)] * 2,
                            options={"maxiter": max_iter * 10, "ftol": 1e-15,
                                     "gtol": tol * 1e-2, "maxcor": 20})
    theta = np.maximum(res.x * scale, 0.0)
    # polish: a few projected Newton steps with a finite-difference Hessian of the gradient
    n_extra = 0
    for _ in range(20):
        ll, g, *_ = _parts(theta, y, v, X, codes, S, restricted, True)
        free = ~((theta <= 0.0) & (g <= 0.0))
        if not free.any() or np.max(np.abs(g[free]) * np.maximum(theta[free], scale)) < tol * abs(ll) * 1e-2:
            break
        H = np.zeros((2, 2))
        for j in range(2):
            h = 1e-6 * max(theta[j], 1e-3 * scale)
            tp = theta.copy()
            tp[j] += h
            H[:, j] = (_parts(tp, y, v, X, codes, S, restricted, True)[1] - g) / h
        H = (H + H.T) / 2.0
        idx = np.flatnonzero(free)
        try:
            step = np.linalg.solve(H[np.ix_(idx, idx)], -g[idx])
        except np.linalg.LinAlgError:
            break
        new = theta.copy()
        new[idx] = np.maximum(theta[idx] + step, 0.0)
        if _parts(new, y, v, X, codes, S, restricted, False)[0] < ll - 1e-12 * abs(ll):
            break
        n_extra += 1
        if np.all(np.abs(new - theta) <= tol * np.maximum(1.0, theta)):
            theta = new
            break
        theta = new
    ll, g, beta, Ainv, yPy = _parts(theta, y, v, X, codes, S, restricted, True)
    free = ~((theta <= 0.0) & (g <= 0.0))
    # first-order optimality: the likelihood gains < 1e-6 per relative change of a component
    crit = float(np.max(np.abs(g[free]) * np.maximum(theta[free], scale), initial=0.0))
    ok = crit <= 1e-6
    msg = "converged" if ok else f"gradient criterion {crit:.3g} > 1e-6 ({res.message})"
    return MultilevelFit(theta, beta, Ainv, yPy, float(ll), ok, int(res.nit) + n_extra, msg)


def study_blocks(v: np.ndarray, codes: np.ndarray, sigma2: np.ndarray,
                 rows: list[np.ndarray]) -> list[np.ndarray]:
    """Dense marginal covariance blocks ``Φ_j`` for clusters given by ``rows``."""
    out = []
    for r in rows:
        cj = codes[r]
        same = (cj[:, None] == cj[None, :]).astype(np.float64)
        out.append(np.diag(v[r] + sigma2[1]) + sigma2[0] * same)
    return out
