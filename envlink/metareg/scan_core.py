"""The window scan's arithmetic: every window's fit, and the maximum statistic per permutation.

A scan fits one model per candidate moderator column (one per window × statistic):
``y = X_fixed β + x_w γ_w + ...`` with the scanned column ``x_w`` last. Every window's
fit is one design of a stacked fit (:mod:`envlink.metareg.stacked`,
:mod:`envlink.metareg.stacked_nested`): rows where ``x_w`` is missing are left out of
that window only. Family-wise inference follows Westfall & Young (1993): the same
permutation of the rows of the whole candidate matrix (within studies for a nested
model, by default) is applied to every window, every window is refitted, and the
largest ``|z|`` (or ``|t|``) over the family is kept per permutation; a window's
family-wise p is ``(1 + #{max* >= |t_w|}) / (1 + n)`` (the single-step maxT adjusted p),
and the family-wise p of the best window is the smallest of them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from envlink.metareg._nested_kernel import use_kernel
from envlink.metareg.shuffles import Shuffler
from envlink.metareg.stacked import StackedFits, fit_stacked, scaled_vcov, stacked_tests
from envlink.metareg.stacked_nested import fit_stacked_nested

__all__ = ["ScanModel", "WindowFits", "fit_windows", "permutation_maxima"]

_EPS = 1e-12
_DESIGNS_PER_BATCH = 400
#: refits (windows x permutations) from which a nested scan uses the compiled kernel
COMPILED_FROM = 50_000


@dataclass(frozen=True)
class ScanModel:
    """The model fitted to every window: shared effects, variances, fixed columns, options."""

    y: np.ndarray  # (k,)
    v: np.ndarray  # (k,)
    fixed: np.ndarray  # (k, p0) the fixed columns, intercept included
    codes: np.ndarray | None  # study codes of a nested model
    method: str  # canonical estimator label (REML, ML, DL, fixed)
    test: str  # "z" or "knapp-hartung"
    tau2: float | None = None
    intercept: bool = True
    tol: float = 1e-8
    max_iter: int = 100

    @property
    def p(self) -> int:
        """Coefficients of a window's model (the fixed columns and the scanned one)."""
        return self.fixed.shape[1] + 1

    def designs(self, columns: np.ndarray) -> np.ndarray:
        """``(N, k, p)`` designs: the fixed columns, then each candidate column ``(k, N)``."""
        N = columns.shape[1]
        X = np.empty((N, self.y.shape[0], self.p))
        X[:, :, :-1] = self.fixed[None]
        X[:, :, -1] = columns.T
        return X

    def fit(self, X: np.ndarray, *, method: str | None = None, start: Any = None,
            tol: float | None = None, compiled: bool = False) -> StackedFits:
        """Stacked fits of ``X`` under this model (``method`` overrides the estimator)."""
        meth = method or self.method
        tol = self.tol if tol is None else tol
        if self.codes is not None:
            return fit_stacked_nested(self.y, self.v, X, self.codes, method=meth, start=start,
                                      tol=tol, max_iter=self.max_iter, compiled=compiled)
        return fit_stacked(self.y, self.v, X, method=meth, tau2=self.tau2 if meth == self.method
                           else None, start=start, tol=tol, max_iter=self.max_iter)

    def statistic(self, f: StackedFits) -> np.ndarray:
        """``|z|`` or ``|t|`` of the scanned (last) coefficient of each design."""
        vc = scaled_vcov(f, test=self.test)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.abs(f.coef[:, -1]) / np.sqrt(vc[:, -1, -1])


@dataclass
class WindowFits:
    """The observed fit of each window (arrays of length W)."""

    k: np.ndarray
    slope: np.ndarray
    se: np.ndarray
    statistic: np.ndarray  # signed z or t
    df: np.ndarray | None
    p: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    Q_M: np.ndarray
    Q_M_p: np.ndarray
    tau2: np.ndarray
    sigma2: np.ndarray | None
    loglik_ml: np.ndarray
    lr: np.ndarray
    lr_p: np.ndarray
    aic: np.ndarray
    delta_aic: np.ndarray
    usable: np.ndarray  # windows in the family (enough rows, a non-singular design)
    null_start: Any  # the null model's estimates per window (warm starts)


def _null_designs(model: ScanModel, columns: np.ndarray) -> np.ndarray:
    """The fixed columns alone, on the rows where each candidate has a value."""
    X = np.repeat(model.fixed[None], columns.shape[1], axis=0)
    X[~np.isfinite(columns.T)] = np.nan
    return X


def fit_windows(model: ScanModel, columns: np.ndarray, level: float) -> WindowFits:
    """Fit every window (``columns`` is ``(k, W)``): slope, tests, Q_M and the ML comparison.

    The likelihood comparison uses maximum likelihood (the fixed effects differ
    between the window's model and the model without the window's column): ``LR =
    2 (ℓ₁ - ℓ₀)`` on 1 df, and AIC with the variance components counted.
    """
    X = model.designs(columns)
    f = model.fit(X)
    tested = list(range(1 if model.intercept else 0, model.p))
    tests = stacked_tests(f, tested, test=model.test)
    slope, se = f.coef[:, -1], tests.se[:, -1]
    stat = tests.statistic[:, -1]
    a = 1.0 - (1.0 - level) / 2.0
    m = len(tested)
    if tests.df is None:
        p = 2.0 * special.ndtr(-np.abs(stat))
        crit = special.ndtri(a)
        qp = special.chdtrc(m, tests.Q_M)
    else:
        df = tests.df.astype(np.float64)
        p = 2.0 * special.stdtr(df, -np.abs(stat))
        crit = special.stdtrit(df, a)
        qp = special.fdtrc(m, df, tests.Q_M)
    X0 = _null_designs(model, columns)
    null = model.fit(X0)
    ml1 = model.fit(X, method="ML") if model.method not in ("ML", "fixed") else f
    ml0 = model.fit(X0, method="ML") if model.method not in ("ML", "fixed") else null
    n_var = 0 if model.method == "fixed" else (2 if model.codes is not None else 1)
    lr = np.maximum(2.0 * (ml1.loglik - ml0.loglik), 0.0)
    aic = -2.0 * ml1.loglik + 2.0 * (model.p + n_var)
    usable = ~f.singular & np.isfinite(stat) & (f.k > model.p)
    start = null.sigma2 if null.sigma2 is not None else null.tau2
    return WindowFits(f.k, slope, se, stat, tests.df, p, slope - crit * se, slope + crit * se,
                      tests.Q_M, qp, f.tau2, f.sigma2, ml1.loglik, lr, special.chdtrc(1, lr),
                      aic, 2.0 - lr, usable, start)


@dataclass
class Maxima:
    """Counts of the permutation distribution of the family's maximum statistic."""

    n: int
    ge_family: np.ndarray  # (W,) permutations whose maximum reaches each window's |t|
    ge_alone: np.ndarray  # (W,) permutations whose own |t| reaches the window's
    maxima: np.ndarray  # (n,) the maximum of each permutation
    refits: int


def permutation_maxima(model: ScanModel, columns: np.ndarray, obs: WindowFits,
                       n_permutations: int, shuffler: Shuffler, *,
                       progress: bool | None = None, tol: float = 1e-6) -> Maxima:
    """Permute the candidate rows ``n_permutations`` times; refit every window each time.

    Windows outside the family (``obs.usable`` false) never count; a permuted fit
    whose design turns singular counts as reaching every observed statistic.
    """
    from envlink.core.progress import progress_bar

    W = columns.shape[1]
    observed = np.where(obs.usable, np.abs(obs.statistic), np.inf) * (1 - _EPS)
    start = obs.null_start
    # the compiled kernel pays for its one-off compilation only on large scans
    compiled = model.codes is not None and use_kernel() and W * n_permutations >= COMPILED_FROM
    batch = max(1, (_DESIGNS_PER_BATCH * (5 if compiled else 1)) // W)
    ge_family = np.zeros(W, dtype=np.int64)
    ge_alone = np.zeros(W, dtype=np.int64)
    maxima = np.empty(n_permutations)
    done = refits = 0
    bar = progress_bar(n_permutations, "scan permutations", "permutation", show=progress)
    try:
        while done < n_permutations:
            b = min(batch, n_permutations - done)
            perms = shuffler.draw(b)
            cols = columns[perms]  # (b, k, W): the same permutation for every window
            X = model.designs(cols.transpose(1, 0, 2).reshape(columns.shape[0], b * W))
            st = np.tile(start, (b, 1)) if np.ndim(start) == 2 else np.tile(start, b)
            f = model.fit(X, start=st, tol=tol, compiled=compiled)
            refits += b * W
            stat = model.statistic(f)
            stat[f.singular] = np.inf
            stat = stat.reshape(b, W)
            stat[:, ~obs.usable] = -np.inf
            stat = np.where(np.isnan(stat), -np.inf, stat)
            mx = stat.max(axis=1)
            maxima[done:done + b] = mx
            ge_family += (mx[:, None] >= observed[None, :]).sum(axis=0)
            ge_alone += (stat >= observed[None, :]).sum(axis=0)
            done += b
            bar.update(b)
    finally:
        bar.close()
    return Maxima(n_permutations, ge_family, ge_alone, maxima, refits)
