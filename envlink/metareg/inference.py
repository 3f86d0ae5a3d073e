"""Tests for meta-regression coefficients: z / Knapp-Hartung, CR2 cluster-robust, permutation.

Formulas and citations are in docs/methods.md: Knapp & Hartung (2003); Hedges,
Tipton & Johnson (2010) with the CR2 correction and Satterthwaite degrees of
freedom of Tipton (2015); Higgins & Thompson (2004) for permutation tests.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from envlink.errors import MetaRegressionWarning, ModelError, user_stacklevel
from envlink.metareg.permutation import PermutationResult, permutation_test_model

__all__ = [
    "knapp_hartung_scale",
    "wald",
    "coef_table",
    "coef_arrays",
    "RobustFit",
    "cr2_adjustment",
    "cluster_robust",
    "PermutationResult",
    "run_permutations",
    "leave_one_out_fits",
    "leave_one_out",
    "standardized_residuals",
    "cooks_distance",
]


def knapp_hartung_scale(yPy: float, k: int, p: int, truncate: bool = False) -> float:
    """Knapp-Hartung scale ``q = y'Py / (k - p)``, optionally ``max(1, q)``.

    Examples
    --------
    >>> knapp_hartung_scale(4.0, 10, 2), knapp_hartung_scale(4.0, 10, 2, truncate=True)
    (0.5, 1.0)
    """
    q = yPy / (k - p)
    return max(1.0, q) if truncate else q


def wald(beta: np.ndarray, vcov: np.ndarray, idx: Sequence[int]) -> float:
    """Wald statistic ``b_Sᵀ V_SS⁻¹ b_S`` for the coefficients ``idx``."""
    idx = list(idx)
    if not idx:
        return float("nan")
    b = beta[idx]
    V = vcov[np.ix_(idx, idx)]
    return float(b @ np.linalg.solve(V, b))


def coef_arrays(beta: np.ndarray, se: np.ndarray, df: np.ndarray | None,
                level: float) -> dict[str, np.ndarray]:
    """Statistic, p, CI bounds and df per coefficient (z when ``df`` is None)."""
    stat = beta / se
    a = 1.0 - (1.0 - level) / 2.0
    if df is None:
        p = 2.0 * special.ndtr(-np.abs(stat))
        crit = np.full(beta.shape, special.ndtri(a))
        dfo = np.full(beta.shape, np.nan)
    else:
        dfo = np.asarray(df, dtype=np.float64)
        p = 2.0 * special.stdtr(dfo, -np.abs(stat))
        crit = special.stdtrit(dfo, a)
    return {"estimate": beta, "se": se, "statistic": stat, "p": p,
            "ci_low": beta - crit * se, "ci_high": beta + crit * se, "df": dfo}


def coef_table(names: Sequence[str], beta: np.ndarray, se: np.ndarray,
               df: np.ndarray | None, level: float) -> pd.DataFrame:
    """Coefficient table: term, estimate, se, statistic, p, ci_low, ci_high, df."""
    return pd.DataFrame({"term": list(names), **coef_arrays(beta, se, df, level)})


@dataclass
class RobustFit:
    """Cluster-robust covariance and per-coefficient Satterthwaite degrees of freedom."""

    vcov: np.ndarray
    df: np.ndarray
    n_clusters: int
    kind: str


def _sym_pow(M: np.ndarray, power: float) -> np.ndarray:
    vals, vecs = np.linalg.eigh((M + M.T) / 2.0)
    if vals.min() <= 1e-12 * max(1.0, vals.max()):
        raise ModelError(
            "CR2 adjustment undefined: a cluster is fully determined by the moderators "
            "(its block of the residual covariance is singular). Use fewer moderators or "
            "larger clusters."
        )
    return (vecs * vals**power) @ vecs.T


def cr2_adjustment(phi: np.ndarray, xj: np.ndarray, m: np.ndarray) -> np.ndarray:
    """The CR2 adjustment ``A_j = D_jᵀ B_j^{-1/2} D_j`` of Pustejovsky & Tipton (2018).

    ``D_jᵀ D_j = Φ_j`` and ``B_j = D_j [(I − H) Φ (I − H)ᵀ]_jj D_jᵀ``. With inverse-variance
    weights (``W = Φ⁻¹``) and ``Φ`` block diagonal by cluster, the block is
    ``Φ_j − X_j M X_jᵀ``. ``A_j`` does not depend on which factor ``D_j`` is taken
    (any ``Q D_j`` with ``Q`` orthogonal gives the same), so the symmetric root of
    ``Φ_j`` is used.

    Examples
    --------
    >>> import numpy as np
    >>> a = cr2_adjustment(np.eye(2), np.ones((2, 1)), np.array([[0.25]]))
    >>> np.round(a, 4).tolist()   # (I − 11ᵀ/4)^(-1/2): √2 along 1, 1 across it
    [[1.2071, 0.2071], [0.2071, 1.2071]]
    """
    root = _sym_pow(phi, 0.5)
    b = root @ (phi - xj @ m @ xj.T) @ root
    return root @ _sym_pow(b, -0.5) @ root


def cluster_robust(X: np.ndarray, e: np.ndarray, phi_blocks: list[np.ndarray],
                   rows: list[np.ndarray], kind: str = "CR2") -> RobustFit:
    """Cluster-robust covariance (CR0, CR1 or CR2) with Satterthwaite df for each coefficient.

    Parameters
    ----------
    X : (k, p) array
        The full design (with the intercept column).
    e : (k,) array
        Residuals ``y - X b`` of the fitted model.
    phi_blocks : list of arrays
        The working covariance ``Φ_j`` of each cluster's rows (the model-implied
        marginal covariance; its inverse gives the weights).
    rows : list of integer arrays
        The row positions of each cluster, in the order of ``phi_blocks``.
    kind : {"CR2", "CR1", "CR0"}

    Returns
    -------
    RobustFit

    Examples
    --------
    >>> import numpy as np
    >>> X = np.ones((4, 1)); e = np.array([1.0, -1.0, 2.0, -2.0])
    >>> r = cluster_robust(X, e, [np.eye(2), np.eye(2)], [np.array([0, 1]), np.array([2, 3])],
    ...                    kind="CR0")
    >>> float(r.vcov[0, 0])
    0.0
    """
    k, p = X.shape
    J = len(rows)
    if J < 2:
        raise ModelError("Cluster-robust standard errors need at least 2 clusters.")
    Wj = [np.linalg.inv(P) for P in phi_blocks]
    XWX = sum(X[r].T @ W @ X[r] for r, W in zip(rows, Wj, strict=True))
    M = np.linalg.inv(XWX)
    meat = np.zeros((p, p))
    Pmats = []  # p_j columns for every coefficient: A_jᵀ W_j X_j M  (n_j × p)
    for r, W, Phi in zip(rows, Wj, phi_blocks, strict=True):
        Xj = X[r]
        if kind == "CR2":
            Aj = cr2_adjustment(Phi, Xj, M)
        else:
            Aj = np.eye(len(r))
        Pj = Aj.T @ W @ Xj @ M
        Pmats.append(Pj)
        u = Pj.T @ e[r]
        meat += np.outer(u, u)
    V = meat
    if kind == "CR1":
        V = V * (J / (J - 1)) * ((k - 1) / (k - p))
    # Satterthwaite df under the working model: Ω = Φ - X M Xᵀ (Tipton 2015)
    df = np.empty(p)
    for c in range(p):
        d = np.array([Pj[:, c] @ Phi @ Pj[:, c] for Pj, Phi in zip(Pmats, phi_blocks, strict=True)])
        U = np.array([X[r].T @ Pj[:, c] for r, Pj in zip(rows, Pmats, strict=True)])  # J × p
        h = np.einsum("ip,pq,iq->i", U, M, U)
        S = U.T @ U
        ev = float(np.sum(d) - np.sum(h))
        sq = float(np.sum(d**2) - 2.0 * np.sum(d * h) + np.trace(M @ S @ M @ S))
        df[c] = ev**2 / sq if sq > 0 else np.nan
    return RobustFit(V, df, J, kind)


# ------------------------------------------------------------------ model-based diagnostics
# These read the model's public fitted state (design_, coef_, vcov_model_, ...) and
# refit clones through the public fit(Design).
def _refit(model: Any, design: Any) -> Any:
    """A clone of ``model`` (same parameters) fitted to ``design``, its warnings kept quiet."""

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MetaRegressionWarning)
        return type(model)(**model.get_params()).fit(design)


def _subset(d: Any, rows: np.ndarray, *, permute_x: np.ndarray | None = None) -> Any:
    from envlink.metareg.design import Design

    y = np.asarray(d.y, dtype=np.float64)[rows]
    v = np.asarray(d.v, dtype=np.float64)[rows]
    X = np.asarray(d.X, dtype=np.float64)
    X = X[permute_x] if permute_x is not None else X[rows]
    groups = {r: np.asarray(g)[rows] for r, g in d.groups.items()}
    return Design(y, v, X, d.intercept, list(d.names), None, 0, [], d.spec, groups)


def _row_index(model: Any) -> pd.Index:
    d = model.design_
    return pd.Index(d.labels if d.labels is not None else np.arange(d.k))


def _full_rows(model: Any, frame: pd.DataFrame) -> pd.DataFrame:
    """Put every input row back (dropped rows as missing, flagged in ``dropped``)."""
    d = model.design_
    if not d.n_dropped or d.keep is None:
        return frame.assign(dropped=False)
    full = pd.DataFrame(np.nan, index=np.arange(d.keep.shape[0]), columns=frame.columns)
    full.loc[np.flatnonzero(d.keep), :] = frame.to_numpy()
    full.index = pd.Index(d.all_labels if d.all_labels is not None else np.arange(d.keep.shape[0]))
    return full.assign(dropped=~d.keep)


def standardized_residuals(model: Any) -> pd.DataFrame:
    """Residuals ``e_i = y_i - x_iᵀ b`` over ``sqrt(Var e_i)``, ``Var e = diag(Φ - X (XᵀWX)⁻¹ Xᵀ)``.

    ``Φ`` is the fitted marginal covariance (``v_i + tau²``, or the multilevel
    blocks); the model-based covariance of ``b`` (``vcov_model_``) is used whatever
    the test. A row fitted exactly (leverage 1) has no standardised residual: it is
    missing, with a :class:`~envlink.errors.MetaRegressionWarning`.
    """

    d = model.design_
    y, v, Xf = d.dense()
    e = y - Xf @ model.coef_
    h = np.einsum("ij,jk,ik->i", Xf, model.vcov_model_, Xf)
    var = v + model.tau2_ - h
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(var > 0, e / np.sqrt(np.where(var > 0, var, 1.0)), np.nan)
    if np.isnan(z).any():
        warnings.warn("Some standardised residuals are undefined (a row fitted exactly, "
                      "leverage 1); they are missing in the table.", MetaRegressionWarning,
                      stacklevel=user_stacklevel())
    out = pd.DataFrame({"residual": e, "se": np.sqrt(np.maximum(var, 0.0)), "z": z},
                       index=_row_index(model))
    return _full_rows(model, out)


def leave_one_out_fits(model: Any) -> list[Any]:
    """The model refitted without each used row in turn (a ModelError where a refit fails)."""
    from envlink.core.progress import progress_bar

    d = model.design_
    k = d.k
    if k - 1 <= d.p:
        raise ModelError(f"Leave-one-out needs k - 1 > p; k = {k}, p = {d.p}.")
    fits: list[Any] = []
    for i in progress_bar(k, "leave-one-out", "fit", show=None if k >= 200 else False, iterable=range(k)):
        rows = np.delete(np.arange(k), i)
        try:
            fits.append(_refit(model, _subset(d, rows)))
        except ModelError as exc:
            fits.append(exc)
    return fits


def leave_one_out(model: Any, fits: list[Any]) -> pd.DataFrame:
    """One row per left-out effect: each coefficient and its se, tau², Q_E, I².

    ``fits`` are :func:`leave_one_out_fits`; a failed refit leaves its row missing,
    with a :class:`~envlink.errors.MetaRegressionWarning`.
    """

    rows: list[dict[str, float]] = []
    bad = 0
    for f in fits:
        if isinstance(f, Exception):
            bad += 1
            rows.append({})
            continue
        r = {"tau2": f.tau2_, "Q_E": f.Q_E_, "I2": f.I2_}
        for j, name in enumerate(f.terms_):
            r[name] = f.coef_[j]
            r[f"se_{name}"] = f.se_[j]
        rows.append(r)
    if bad:
        warnings.warn(f"{bad} leave-one-out fit(s) failed (e.g. a category left empty); "
                      "their rows are missing.", MetaRegressionWarning, stacklevel=user_stacklevel())
    return _full_rows(model, pd.DataFrame(rows, index=_row_index(model)))


def cooks_distance(model: Any, fits: list[Any]) -> pd.Series:
    """Cook's distances ``(b - b₍₋ᵢ₎)ᵀ Var(b)⁻¹ (b - b₍₋ᵢ₎)`` with ``Var(b)`` of the full fit."""
    Vinv = np.linalg.inv(model.vcov_)
    vals = np.array([np.nan if isinstance(f, Exception) else
                     float((model.coef_ - f.coef_) @ Vinv @ (model.coef_ - f.coef_))
                     for f in fits])
    out = _full_rows(model, pd.DataFrame({"cooks_distance": vals}, index=_row_index(model)))
    return out["cooks_distance"]


def run_permutations(model: Any, n_permutations: int, seed: int | None, progress: bool | None,
                     scheme: str | None = None) -> PermutationResult:
    """Permutation p of each term and of Q_M (see :mod:`envlink.metareg.permutation`)."""
    return permutation_test_model(model, n_permutations, seed, scheme=scheme, progress=progress)
