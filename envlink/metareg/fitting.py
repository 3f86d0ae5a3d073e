"""The steps of one meta-regression fit: heterogeneity, then the coefficient tests.

:func:`fit_heterogeneity` estimates tau² (or the two components of the multilevel
model) and the coefficients; :func:`coefficient_tests` scales their covariance by
the chosen test of :data:`~envlink.metareg.vocabulary.TESTS` (or by CR2 when
clusters are given) and tests the moderators. Plain functions of the design and of
explicit values, so the model class only stores what they return. Formulas and
citations: docs/methods.md.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from envlink.errors import ModelError
from envlink.metareg import estimators as est
from envlink.metareg import inference as inf
from envlink.metareg.degenerate import check_random_effect
from envlink.metareg.formula import moderator_positions
from envlink.metareg.lockstep import Request, Together, can_share, fit_together
from envlink.metareg.multilevel import fit_multilevel, study_blocks
from envlink.metareg.vocabulary import ESTIMATORS, TESTS, resolve

__all__ = ["Heterogeneity", "CovarianceScale", "CoefficientTests", "fit_heterogeneity", "coefficient_tests",
           "z_scale", "knapp_hartung_scale", "model_blocks"]


@dataclass
class Heterogeneity:
    """tau² (or its components), the coefficients and their model-based covariance."""

    method: str
    tau2: float
    converged: bool
    n_iter: int
    coef: np.ndarray
    vcov_model: np.ndarray
    yPy: float
    tau2_se: float | None
    I2: float
    H2: float
    variance_components: dict[str, float] = field(default_factory=dict)
    I2_components: dict[str, float] | None = None
    nested_codes: np.ndarray | None = None
    sigma2: np.ndarray | None = None  # (between, within) of the multilevel model
    messages: list[str] = field(default_factory=list)
    together: Together | None = None  # the interval and R²'s base, when solved alongside


def _independent(d: Any, method: str, tau2: float | None, g0: est.GLS, s2: float, *, tol: float,
                 max_iter: int, use_numba: bool, together: Request | None) -> Heterogeneity:
    tg = None
    if tau2 is not None:
        label, tf = "fixed", est.TauFit(float(tau2), True, 0)
    else:
        entry = ESTIMATORS.parse(method).entry
        label = entry.name
        if together is not None and can_share(label):
            tg = fit_together(d, label, together, g0=g0, tol=tol, max_iter=max_iter,
                              use_numba=use_numba)
            tf = tg.main
        else:
            tf = est.estimate_tau2(d, label, tol=tol, max_iter=max_iter, use_numba=use_numba, g0=g0)
    msgs = list(tf.messages)
    t = tf.tau2
    g = tf.fit if tf.fit is not None and tf.fit.tau2 == t else (
        g0 if t == 0.0 else est.gls(est.sums_at(d, t, use_numba), t))
    # large-sample SE of tau² from the (restricted) likelihood information
    likelihood = ESTIMATORS[label].info["likelihood"] if label in ESTIMATORS else None
    info = {"restricted": 0.5 * g.trPP, "full": 0.5 * g.sw2}.get(likelihood or "")
    if t == 0.0 and tau2 is None:
        msgs.append("tau² is estimated at its lower bound 0: no heterogeneity beyond sampling "
                    "error is detected, so I² = 0, H² = 1 and R² is not informative.")
    elif t == 0.0:
        msgs.append("I² is 0 and H² is 1 by construction: tau² is fixed at 0 (the fixed-effect "
                    "model), so they say nothing about heterogeneity; Q_E tests it.")
    return Heterogeneity(
        label, float(t), bool(tf.converged), int(tf.n_iter), np.asarray(g.beta, dtype=np.float64),
        g.Ainv, g.yPy, float(np.sqrt(1.0 / info)) if info else None,
        100.0 * t / (t + s2) if t + s2 > 0 else 0.0, (t + s2) / s2 if s2 > 0 else 1.0,
        messages=msgs, together=tg,
    )


def _nested(d: Any, method: str, column: str, g0: est.GLS, s2: float, *, tol: float,
            max_iter: int) -> Heterogeneity:
    label = ESTIMATORS.parse(method).entry.name
    codes, _ = pd.factorize(np.asarray(d.groups["nested"]))
    check_random_effect(codes, column)  # one level, or one row per level: a flat likelihood
    y, v, Xf = d.dense()
    k, p = d.k, d.p
    dl = max(0.0, (g0.yPy - (k - p)) / g0.trP) if g0.trP > 0 else 0.0
    mf = fit_multilevel(y, v, Xf, codes, method=label, start=dl, tol=tol, max_iter=max_iter)
    s1, s2w = (float(x) for x in mf.sigma2)
    msgs = []
    if not mf.converged:
        msgs.append(f"Multilevel {label} did not converge ({mf.message}); increase max_iter "
                    "or simplify the model.")
    tot = s1 + s2w + s2
    msgs.extend(_component_at_zero(codes, column, (s1, s2w), s2))
    return Heterogeneity(
        label, s1 + s2w, mf.converged, mf.n_iter, mf.beta, mf.vcov, mf.yPy, None,
        100.0 * (s1 + s2w) / tot if tot > 0 else 0.0, tot / s2 if s2 > 0 else 1.0,
        {f"between_{column}": s1, f"within_{column}": s2w},
        {f"between_{column}": 100.0 * s1 / tot if tot else 0.0,
         f"within_{column}": 100.0 * s2w / tot if tot else 0.0},
        codes, np.asarray(mf.sigma2, dtype=np.float64), msgs,
    )


#: fewer groups than this with more than one effect make a component at 0 worth a note
FEW_MULTI_ROW_GROUPS = 10


def _component_at_zero(codes: np.ndarray, column: str, sigma2: tuple[float, float],
                       typical: float) -> list[str]:
    """A note for a variance component estimated at 0 when few groups have several effects."""
    multi = int(np.sum(np.bincount(codes) > 1))
    if multi >= FEW_MULTI_ROW_GROUPS:
        return []
    zero = [f"{side}_{column}" for side, s in zip(("between", "within"), sigma2, strict=True)
            if s <= 1e-8 * max(typical, 1e-300)]
    if not zero:
        return []
    return [f"The variance component {' and '.join(zero)} is estimated at 0, and only {multi} of "
            f"{int(codes.max()) + 1} {column!r} groups have more than one effect: the split of "
            "tau² between and within groups rests on little information; read the total tau²."]


def fit_heterogeneity(d: Any, *, method: str, tau2: float | None, nested: Any, g0: est.GLS,
                      typical_variance: float, tol: float, max_iter: int,
                      use_numba: bool, together: Request | None = None) -> Heterogeneity:
    """tau² by ``method`` (or fixed at ``tau2``), or the multilevel model when ``nested`` is given.

    ``nested`` is the option as given (a column name, or labels with arrays): a
    column name labels the variance components ``between_<col>`` / ``within_<col>``.
    ``together`` asks for the Q-profile interval and R²'s base model in the same
    passes as a REML or ML estimate (:mod:`envlink.metareg.lockstep`).
    """
    if nested is None:
        return _independent(d, method, tau2, g0, typical_variance, tol=tol, max_iter=max_iter,
                            use_numba=use_numba, together=together)
    column = nested if isinstance(nested, str) else "study"
    return _nested(d, method, column, g0, typical_variance, tol=tol, max_iter=max_iter)


@dataclass
class CovarianceScale:
    """A test's covariance of the coefficients and its reference distribution."""

    vcov: np.ndarray
    df: np.ndarray | None  # per-coefficient t df; None for z tests
    test: str  # "z" or "t"
    df_resid: int | None  # the denominator df of Q_M under t tests
    kh_scale: float | None = None


def z_scale(vcov: np.ndarray, *, yPy: float, k: int, p: int, truncate: bool) -> CovarianceScale:
    """z tests: the model-based covariance, normal reference."""
    return CovarianceScale(vcov, None, "z", None)


def knapp_hartung_scale(vcov: np.ndarray, *, yPy: float, k: int, p: int,
                        truncate: bool) -> CovarianceScale:
    """Knapp-Hartung: the covariance times ``q = y'Py / (k - p)`` (or ``max(1, q)``), t on k - p df."""
    q = inf.knapp_hartung_scale(yPy, k, p, truncate)
    return CovarianceScale(vcov * q, np.full(p, float(k - p)), "t", k - p, q)


@dataclass
class CoefficientTests:
    """Coefficient tests and the omnibus test of the moderators."""

    scale: CovarianceScale
    se: np.ndarray
    coef_arrays: dict[str, np.ndarray]
    Q_M: float | None
    Q_M_df: int
    Q_M_p: float | None
    n_clusters: int | None = None
    messages: list[str] = field(default_factory=list)


def model_blocks(v: np.ndarray, tau2: float, rows: list[np.ndarray], nested_codes: Any = None,
                 sigma2: Any = None) -> list[np.ndarray]:
    """The fitted marginal covariance ``Φ_j`` of each group of rows (``v + tau²``, or study blocks)."""
    if nested_codes is not None:
        return study_blocks(v, nested_codes, sigma2, rows)
    return [np.diag(v[r] + tau2) for r in rows]


def _cluster(d: Any, h: Heterogeneity) -> inf.RobustFit:
    y, v, Xf = d.dense()
    codes, _ = pd.factorize(np.asarray(d.groups["cluster"]))
    order = np.argsort(codes, kind="stable")
    bounds = np.flatnonzero(np.diff(codes[order])) + 1
    rows = np.split(order, bounds)
    if h.nested_codes is not None:
        pairs = pd.DataFrame({"n": h.nested_codes, "c": codes}).drop_duplicates()
        if pairs["n"].duplicated().any():
            raise ModelError("With nested= and cluster=, every study must lie within one "
                             "cluster; some studies span several clusters.")
    e = y - Xf @ h.coef
    blocks = model_blocks(v, h.tau2, rows, h.nested_codes, h.sigma2)
    return inf.cluster_robust(Xf, e, blocks, rows, "CR2")


def coefficient_tests(d: Any, h: Heterogeneity, terms: list[str], *, test: str, clustered: bool,
                      truncate: bool, level: float) -> CoefficientTests:
    """Standard errors, per-coefficient tests and Q_M under ``test`` (or CR2 when ``clustered``)."""
    k, p = d.k, d.p
    vc = np.array(h.vcov_model, dtype=np.float64)
    msgs: list[str] = []
    n_clusters = None
    entry = TESTS.parse(test).entry
    if clustered:
        rf = _cluster(d, h)
        scale = CovarianceScale(rf.vcov, rf.df, "t", rf.n_clusters - 1)
        n_clusters = rf.n_clusters
        if entry.info.get("adjusts"):
            msgs.append(f"cluster= gives CR2 standard errors with Satterthwaite df; the "
                        f"{entry.info['words']} adjustment is not applied on top of them.")
    else:
        scale = resolve(entry)(vc, yPy=h.yPy, k=k, p=p, truncate=truncate)
    se = np.sqrt(np.diag(scale.vcov))
    arrays = inf.coef_arrays(h.coef, se, scale.df, level)
    idx = moderator_positions(terms)
    if not idx:
        return CoefficientTests(scale, se, arrays, None, 0, None, n_clusters, msgs)
    w = inf.wald(h.coef, scale.vcov, idx)
    m = len(idx)
    if scale.test == "z":
        return CoefficientTests(scale, se, arrays, w, m, float(special.chdtrc(m, w)), n_clusters, msgs)
    return CoefficientTests(scale, se, arrays, w / m, m, float(special.fdtrc(m, scale.df_resid, w / m)),
                 n_clusters, msgs)
