"""Many meta-regressions fitted at once: stacked designs sharing the effects, vectorised scoring.

Permutation tests and window scans refit one model to thousands of designs that
share the effects ``y`` and sampling variances ``v`` and differ only in their
moderator rows (a permutation of them, or another window's covariate). Here every
design is one slice of a stacked array ``X`` of shape ``(N, k, p)`` (the full design,
the intercept column included), and each Fisher-scoring step is a handful of array
operations over all ``N`` designs together, with no Python loop over designs.

For the model with independent effects the products ``x_i x_j``, ``x_i y``, ``1`` and
``y²`` of each row are formed once per design; each step then needs one batched
product with ``(w, w², w³)``, ``w = 1 / (v + tau²)``, to obtain every weighted sum the
estimators use (:mod:`envlink.metareg.estimators` computes the same sums for one
design). tau² follows by Fisher scoring (REML, ML; the secant of the score replaces
the Fisher step where it is a better Newton step), by DerSimonian-Laird, or is fixed.
The multilevel model (effects nested in studies) is fitted in
:mod:`envlink.metareg.stacked_nested`.

A row whose moderators are not all finite is left out of that design (its weight
is zero), so designs may use different rows, as windows of a scan do. Designs whose
weighted moderator matrix is singular are marked ``singular`` and hold NaN.
Formulas and citations: docs/methods.md.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from envlink.errors import ModelError

__all__ = ["StackedFits", "StackedTests", "fit_stacked", "stacked_tests", "scaled_vcov",
           "STACKED_METHODS", "prepare"]

#: tau² estimators that the stacked fits compute (others refit one design at a time)
STACKED_METHODS = ("REML", "ML", "DL", "fixed")
_LOG2PI = float(np.log(2.0 * np.pi))


@dataclass
class StackedFits:
    """Fits of ``N`` stacked designs (one entry per design).

    Attributes
    ----------
    coef : (N, p) array
        Coefficients.
    vcov : (N, p, p) array
        Model-based covariance ``(XᵀWX)⁻¹``.
    tau2 : (N,) array
        tau² (the sum of the two components of a multilevel model).
    sigma2 : (N, 2) array or None
        ``(between, within)`` components of a multilevel model.
    yPy : (N,) array
        Weighted residual sum of squares at the estimate (Q_E for independent
        effects at tau² = 0 is ``yPy`` of the fixed-effect fit).
    loglik : (N,) array
        Restricted (REML) or full (ML) log-likelihood at the estimate, as maximised;
        for DL the restricted one, for a fixed tau² the full one.
    k : (N,) array
        Rows used by each design.
    converged, singular : (N,) bool arrays
    """

    coef: np.ndarray
    vcov: np.ndarray
    tau2: np.ndarray
    sigma2: np.ndarray | None
    yPy: np.ndarray
    loglik: np.ndarray
    k: np.ndarray
    converged: np.ndarray
    singular: np.ndarray

    @property
    def p(self) -> int:
        """Number of coefficients."""
        return int(self.coef.shape[1])


def prepare(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Finite design rows and the mask of rows used: NaN rows are zeroed and masked out.

    Examples
    --------
    >>> X = np.array([[[1.0, 2.0], [1.0, np.nan]]])
    >>> Xc, m = prepare(X)
    >>> Xc.tolist(), m.tolist()
    ([[[1.0, 2.0], [0.0, 0.0]]], [[1.0, 0.0]])
    """
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 3:
        raise ModelError(f"stacked designs must have shape (N, k, p); got {X.shape}.")
    ok = np.isfinite(X).all(axis=2)
    if ok.all():
        return X, np.ones(ok.shape)
    return np.where(ok[:, :, None], X, 0.0), ok.astype(np.float64)


class _Products:
    """Per-row products of each design, formed once: ``x_i x_j`` (i ≤ j), ``x_i y``, ``1``, ``y²``."""

    def __init__(self, y: np.ndarray, X: np.ndarray, m: np.ndarray) -> None:
        N, k, p = X.shape
        self.p = p
        self.iu = np.triu_indices(p)
        q = len(self.iu[0])
        self.q = q
        Xt = X.transpose(0, 2, 1)  # (N, p, k)
        Z = np.empty((N, q + p + 2, k))
        Z[:, :q] = Xt[:, self.iu[0]] * Xt[:, self.iu[1]]
        Z[:, q:q + p] = Xt * y
        Z[:, q + p] = m
        Z[:, q + p + 1] = m * (y * y)
        self.Z = Z

    def take(self, idx: np.ndarray) -> _Products:
        out = object.__new__(_Products)
        out.p, out.iu, out.q, out.Z = self.p, self.iu, self.q, self.Z[idx]
        return out

    def sym(self, flat: np.ndarray) -> np.ndarray:
        """(n, q) upper triangles -> (n, p, p) symmetric matrices."""
        out = np.empty((flat.shape[0], self.p, self.p))
        out[:, self.iu[0], self.iu[1]] = flat
        out[:, self.iu[1], self.iu[0]] = flat
        return out


@dataclass
class _GLS:
    """Generalised least squares of each design at its tau² (the quantities of estimators.GLS)."""

    beta: np.ndarray
    Ainv: np.ndarray
    yPy: np.ndarray
    trP: np.ndarray
    yPPy: np.ndarray
    trPP: np.ndarray
    sw: np.ndarray
    sw2: np.ndarray
    logdetA: np.ndarray
    slog: np.ndarray
    singular: np.ndarray


def _inv_sym(A: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inverse, log-determinant and a singularity mask of stacked symmetric matrices."""
    dg = np.einsum("nii->ni", A)
    bad = ~(dg > 0).all(axis=1)
    D = 1.0 / np.sqrt(np.where(dg > 0, dg, 1.0))
    R = A * D[:, :, None] * D[:, None, :]
    vals, vecs = np.linalg.eigh(R)
    bad |= vals[:, 0] < 1e-10 * np.maximum(vals[:, -1], 1e-300)
    vals = np.where(bad[:, None], 1.0, vals)
    Rinv = (vecs / vals[:, None, :]) @ vecs.transpose(0, 2, 1)
    Ainv = Rinv * D[:, :, None] * D[:, None, :]
    logdet = np.log(vals).sum(axis=1) - 2.0 * np.log(D).sum(axis=1)
    return Ainv, logdet, bad


def _gls(P: _Products, v: np.ndarray, m: np.ndarray, tau2: np.ndarray) -> _GLS:
    vt = v[None, :] + tau2[:, None]
    w = m / vt
    w2 = w * w
    # every weighted sum: (n, q + p + 2) per power of the weights
    S1, S2 = np.einsum("nrk,nk->nr", P.Z, w), np.einsum("nrk,nk->nr", P.Z, w2)
    S3 = np.einsum("nrk,nk->nr", P.Z[:, :P.q], w2 * w)
    q, p = P.q, P.p
    A, B, C = P.sym(S1[:, :q]), P.sym(S2[:, :q]), P.sym(S3)
    b1, b2 = S1[:, q:q + p], S2[:, q:q + p]
    sw, sw2 = S1[:, q + p], S2[:, q + p]
    syy1, syy2 = S1[:, q + p + 1], S2[:, q + p + 1]
    Ainv, logdetA, bad = _inv_sym(A)
    beta = np.einsum("nij,nj->ni", Ainv, b1)
    yPy = syy1 - np.einsum("ni,ni->n", b1, beta)
    AB = Ainv @ B
    trP = sw - np.einsum("nii->n", AB)
    yPPy = syy2 - 2.0 * np.einsum("ni,ni->n", beta, b2) + np.einsum("ni,nij,nj->n", beta, B, beta)
    trPP = sw2 - 2.0 * np.einsum("nij,nji->n", Ainv, C) + np.einsum("nij,nji->n", AB, AB)
    slog = (m * np.log(vt)).sum(axis=1)
    return _GLS(beta, Ainv, np.maximum(yPy, 0.0), trP, np.maximum(yPPy, 0.0), trPP, sw, sw2,
                logdetA, slog, bad)


def _gls_rows(P: _Products, v: np.ndarray, m: np.ndarray, rows: np.ndarray, t: np.ndarray,
              new: np.ndarray) -> _GLS:
    """GLS of the designs ``rows`` at ``new``, computed over all designs (cheaper than a copy)."""
    full = t.copy()
    full[rows] = new
    return _take(_gls(P, v, m, full), rows)


def _loglik(g: _GLS, k: np.ndarray, p: int, restricted: bool) -> np.ndarray:
    if restricted:
        return -0.5 * ((k - p) * _LOG2PI + g.slog + g.logdetA + g.yPy)
    return -0.5 * (k * _LOG2PI + g.slog + g.yPy)


def _take(g: _GLS, idx: np.ndarray) -> _GLS:
    return _GLS(*(getattr(g, f)[idx] for f in g.__dataclass_fields__))


def _put(g: _GLS, idx: np.ndarray, new: _GLS) -> None:
    for f in g.__dataclass_fields__:
        getattr(g, f)[idx] = getattr(new, f)


def _score_step(g: _GLS, restricted: bool) -> tuple[np.ndarray, np.ndarray]:
    """(score, Fisher step) of the (restricted) likelihood in tau²."""
    if restricted:
        return 0.5 * (g.yPPy - g.trP), (g.yPPy - g.trP) / np.where(g.trPP > 0, g.trPP, np.inf)
    return 0.5 * (g.yPPy - g.sw), (g.yPPy - g.sw) / np.where(g.sw2 > 0, g.sw2, np.inf)


def _scoring(P: _Products, v: np.ndarray, m: np.ndarray, k: np.ndarray, start: np.ndarray,
             restricted: bool, tol: float, max_iter: int) -> tuple[np.ndarray, _GLS, np.ndarray]:
    """Fisher scoring (secant where better, halving on a decrease) for every design at once."""
    t = np.maximum(start, 0.0)
    g = _gls(P, v, m, t)
    ll = _loglik(g, k, P.p, restricted)
    done = g.singular.copy()
    prev_t = np.full(t.shape, np.nan)
    prev_s = np.full(t.shape, np.nan)
    for _ in range(max_iter):
        act = np.flatnonzero(~done)
        if not act.size:
            break
        ga = _take(g, act)
        ta, lla = t[act], ll[act]
        sc, step = _score_step(ga, restricted)
        dt, ds = ta - prev_t[act], sc - prev_s[act]
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = np.where((dt != 0) & (ds != 0), ds / dt, np.nan)
        step = np.where(slope < 0, -sc / np.where(slope < 0, slope, -1.0), step)
        at0 = (ta <= 0.0) & (step <= 0.0)
        prev_t[act], prev_s[act] = ta, sc
        step = np.where(at0, 0.0, step)
        new = np.maximum(ta + step, 0.0)
        step = new - ta
        Pa = P.take(act) if act.size < 0.75 * t.size else None
        gn = _gls(Pa, v, m[act], new) if Pa is not None else _gls_rows(P, v, m, act, t, new)
        lln = _loglik(gn, k[act], P.p, restricted)
        for _h in range(30):  # halve the steps that lowered the likelihood
            worse = np.flatnonzero(lln < lla - 1e-12 * np.maximum(1.0, np.abs(lla)))
            if not worse.size:
                break
            step[worse] /= 2.0
            new[worse] = ta[worse] + step[worse]
            sub = _gls((Pa or P.take(act)).take(worse), v, m[act][worse], new[worse])
            _put(gn, worse, sub)
            lln[worse] = _loglik(sub, k[act][worse], P.p, restricted)
        conv = at0 | (np.abs(new - ta) <= tol * np.maximum(1.0, new))
        t[act], ll[act] = new, lln
        _put(g, act, gn)
        done[act] = conv | gn.singular
    return t, g, done


def _dl(g0: _GLS, k: np.ndarray, p: int) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        t = (g0.yPy - (k - p)) / g0.trP
    return np.where(g0.trP > 0, np.maximum(t, 0.0), 0.0)


def fit_stacked(y: np.ndarray, v: np.ndarray, X: np.ndarray, *, method: str = "REML",
                tau2: float | None = None, start: np.ndarray | float | None = None,
                tol: float = 1e-10, max_iter: int = 100) -> StackedFits:
    """Fit the model with independent effects to each of ``N`` stacked designs.

    Parameters
    ----------
    y, v : (k,) arrays
        Effects and sampling variances, shared by every design.
    X : (N, k, p) array
        The full designs (intercept column included); a row with a non-finite value
        is left out of that design.
    method : {"REML", "ML", "DL", "fixed"}
        The tau² estimator's canonical label (``"fixed"`` with ``tau2``).
    tau2 : float, optional
        A fixed tau² (then ``method`` is ignored).
    start : float or (N,) array, optional
        Starting tau² of REML / ML (default DerSimonian-Laird of each design).
    tol, max_iter : float, int
        Convergence on the change of tau² relative to ``max(1, tau²)``.

    Returns
    -------
    StackedFits

    Examples
    --------
    >>> y = np.array([0.1, 0.5, 0.3, 0.9, 0.6]); v = np.array([0.04, 0.05, 0.03, 0.06, 0.05])
    >>> x = np.arange(1.0, 6.0)
    >>> X = np.stack([np.column_stack([np.ones(5), x]), np.column_stack([np.ones(5), x[::-1]])])
    >>> f = fit_stacked(y, v, X)
    >>> [round(float(b), 4) for b in f.coef[0]]      # as MetaRegression(moderators="x")
    [0.0345, 0.1384]
    """
    y = np.asarray(y, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    X, m = prepare(X)
    N, _, p = X.shape
    k = m.sum(axis=1)
    P = _Products(y, X, m)
    if tau2 is not None or method == "fixed":
        t = np.full(N, float(tau2 or 0.0))
        g, conv = _gls(P, v, m, t), np.ones(N, dtype=bool)
    else:
        g0 = _gls(P, v, m, np.zeros(N))
        t = _dl(g0, k, p)
        if method == "DL":
            g, conv = _gls(P, v, m, t), np.ones(N, dtype=bool)
        elif method in ("REML", "ML"):
            st = t if start is None else np.broadcast_to(np.asarray(start, dtype=np.float64), (N,))
            t, g, conv = _scoring(P, v, m, k, st, method == "REML", tol, max_iter)
        else:
            raise ModelError(f"stacked fits use one of {', '.join(STACKED_METHODS)}; got {method!r}.")
    ll = _loglik(g, k, p, method in ("REML", "DL") and tau2 is None)
    bad = g.singular | (k <= p)
    nan = np.where(bad, np.nan, 1.0)
    return StackedFits(g.beta * nan[:, None], g.Ainv * nan[:, None, None], t, None, g.yPy * nan,
                       ll * nan, k, conv & ~bad, bad)


def scaled_vcov(f: StackedFits, *, test: str = "z", truncate: bool = False) -> np.ndarray:
    """The covariance the tests use: model-based (z), or times the Knapp-Hartung scale."""
    if test != "knapp-hartung":
        return f.vcov
    with np.errstate(invalid="ignore", divide="ignore"):
        q = f.yPy / (f.k - f.p)
    if truncate:
        q = np.maximum(q, 1.0)
    return f.vcov * q[:, None, None]


@dataclass
class StackedTests:
    """Coefficient statistics and Q_M of stacked fits under one test."""

    se: np.ndarray  # (N, p)
    statistic: np.ndarray  # (N, p): z or t
    df: np.ndarray | None  # (N,) residual df of t tests; None for z
    Q_M: np.ndarray  # (N,): chi² (z) or F (t) of the tested coefficients


def stacked_tests(f: StackedFits, idx: list[int], *, test: str = "z",
                  truncate: bool = False) -> StackedTests:
    """z or Knapp-Hartung statistics of every coefficient and the Wald test of ``idx``.

    Knapp-Hartung scales the covariance by ``q = y'Py / (k - p)`` (``max(1, q)``
    with ``truncate``) and gives t tests on ``k - p`` df and ``Q_M`` as an F
    statistic (the Wald statistic over ``len(idx)`` and ``q``), as
    :func:`envlink.metareg.fitting.coefficient_tests` does for one design.

    Examples
    --------
    >>> y = np.array([0.1, 0.5, 0.3, 0.9, 0.6]); v = np.array([0.04, 0.05, 0.03, 0.06, 0.05])
    >>> X = np.column_stack([np.ones(5), np.arange(1.0, 6.0)])[None]
    >>> t = stacked_tests(fit_stacked(y, v, X), [1])
    >>> round(float(t.Q_M[0]), 6) == round(float(t.statistic[0, 1]) ** 2, 6)
    True
    """
    vc = scaled_vcov(f, test=test, truncate=truncate)
    df = f.k - f.p if test == "knapp-hartung" else None
    se = np.sqrt(np.einsum("nii->ni", vc))
    with np.errstate(invalid="ignore", divide="ignore"):
        stat = f.coef / se
    b = f.coef[:, idx]
    V = vc[:, idx][:, :, idx]
    if len(idx) == 1:
        with np.errstate(invalid="ignore", divide="ignore"):
            w = b[:, 0] ** 2 / V[:, 0, 0]
    else:
        good = np.isfinite(V).all(axis=(1, 2))
        w = np.full(b.shape[0], np.nan)
        if good.any():
            sol = np.linalg.solve(V[good], b[good][:, :, None])[:, :, 0]
            w[good] = np.einsum("ni,ni->n", b[good], sol)
    return StackedTests(se, stat, df, w if df is None else w / len(idx))
