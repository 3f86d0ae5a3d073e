"""Rubin's rules: pooling the fits of several completed tables (imputed dates) into one result.

For ``M`` fits of the same model, each giving a coefficient ``Q_m`` and its
variance ``U_m`` (Little & Rubin 2002, section 5.4):

- pooled estimate ``Q̄ = mean(Q_m)``; within-imputation variance ``Ū = mean(U_m)``;
  between-imputation variance ``B = Σ (Q_m − Q̄)² / (M − 1)``;
- total variance ``T = Ū + (1 + 1/M) B``; relative increase in variance
  ``r = (1 + 1/M) B / Ū``; ``λ = (1 + 1/M) B / T``;
- degrees of freedom (Barnard & Rubin 1999): ``ν_old = (M − 1) / λ²``,
  ``ν_obs = (ν_com + 1) / (ν_com + 3) · ν_com · (1 − λ)``,
  ``ν = ν_old ν_obs / (ν_old + ν_obs)`` (``ν = ν_old`` when the complete-data test is z,
  ``ν_com = ∞``);
- fraction of missing information ``γ = (r + 2 / (ν_old + 3)) / (r + 1)`` (0 when ``B = 0``);
- t tests and intervals on ``ν`` df; ``sqrt(T / Ū)`` is how much the SE grows
  because of the imputed values (here: the imprecise dates).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from envlink.errors import InputError, ModelError

__all__ = ["PooledResult", "rubin_pool", "ImputationResult"]


@dataclass
class PooledResult:
    """Coefficients pooled by Rubin's rules (one row per term in :attr:`table`)."""

    table: pd.DataFrame  # term, estimate, within, between, total, se, df, statistic, p, ci_low,
    # ci_high, riv, lambda, fmi, se_growth
    m: int
    df_complete: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        rows = [{k: (None if isinstance(v, float) and not np.isfinite(v) else v)
                 for k, v in r.items()} for r in self.table.to_dict("records")]
        return {"m": self.m, "df_complete": None if not np.isfinite(self.df_complete)
                else self.df_complete, "coefficients": rows}


def rubin_pool(estimates: Any, variances: Any, *, terms: list[str] | None = None,
               df_complete: float = np.inf, level: float = 0.95) -> PooledResult:
    """Pool ``M`` fits by Rubin's rules with Barnard-Rubin degrees of freedom.

    Parameters
    ----------
    estimates, variances : (M, p) array-like
        Each fit's coefficients and their sampling variances (squared SEs).
    terms : list of str, optional
    df_complete : float, default inf
        Degrees of freedom of the complete-data test (``k − p`` for Knapp-Hartung,
        infinite for z tests).
    level : float, default 0.95

    Returns
    -------
    PooledResult

    Examples
    --------
    >>> r = rubin_pool([[1.0], [2.0], [3.0]], [[0.5], [0.5], [0.5]])
    >>> row = r.table.iloc[0]
    >>> float(row["total"]), float(row["riv"]), float(row["df"])  # T = 0.5 + 4/3; nu = 2 (11/8)²
    (1.8333333333333333, 2.6666666666666665, 3.78125)
    """
    Q = np.atleast_2d(np.asarray(estimates, dtype=np.float64))
    U = np.atleast_2d(np.asarray(variances, dtype=np.float64))
    if Q.shape != U.shape:
        raise InputError(f"estimates {Q.shape} and variances {U.shape} must have one shape.")
    M, p = Q.shape
    if M < 2:
        raise ModelError("Rubin's rules need at least 2 completed fits.")
    if not (np.isfinite(Q).all() and np.isfinite(U).all() and (U >= 0).all()):
        raise ModelError("Every completed fit needs finite estimates and variances.")
    qbar = Q.mean(axis=0)
    ubar = U.mean(axis=0)
    b = Q.var(axis=0, ddof=1)
    t = ubar + (1.0 + 1.0 / M) * b
    with np.errstate(divide="ignore", invalid="ignore"):
        riv = (1.0 + 1.0 / M) * b / ubar
        lam = (1.0 + 1.0 / M) * b / t
        nu_old = np.where(lam > 0, (M - 1) / lam**2, np.inf)
    if np.isfinite(df_complete):
        nu_obs = (df_complete + 1.0) / (df_complete + 3.0) * df_complete * (1.0 - lam)
        with np.errstate(divide="ignore", invalid="ignore"):
            nu = np.where(np.isfinite(nu_old), nu_old * nu_obs / (nu_old + nu_obs), nu_obs)
    else:
        nu = nu_old
    fmi = (riv + 2.0 / (nu_old + 3.0)) / (riv + 1.0)  # Rubin's γ, with ν = (M - 1) / λ²
    se = np.sqrt(t)
    stat = qbar / se
    a = 1.0 - (1.0 - level) / 2.0
    finite = np.isfinite(nu)
    pval = np.where(finite, 2.0 * special.stdtr(np.where(finite, nu, 1.0), -np.abs(stat)),
                    2.0 * special.ndtr(-np.abs(stat)))
    crit = np.where(finite, special.stdtrit(np.where(finite, nu, 1.0), a), special.ndtri(a))
    table = pd.DataFrame({
        "term": terms or [f"x{j}" for j in range(p)], "estimate": qbar, "within": ubar,
        "between": b, "total": t, "se": se, "df": nu, "statistic": stat, "p": pval,
        "ci_low": qbar - crit * se, "ci_high": qbar + crit * se, "riv": riv, "lambda": lam,
        "fmi": fmi, "se_growth": np.sqrt(t / ubar)})
    return PooledResult(table, M, float(df_complete))


@dataclass
class ImputationResult:
    """Fits over ``draws`` plausible date windows, pooled by Rubin's rules.

    ``rules`` counts the rows per drawing rule (``fixed``, ``sub-window``,
    ``day/month order``, ``season reading``); ``draws`` holds each draw's coefficients.
    """

    pooled: PooledResult
    m: int
    seed: int | None
    rules: dict[str, int]
    draws: pd.DataFrame
    model: str
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        return {"draws": self.m, "seed": self.seed, "rows_per_rule": dict(self.rules),
                "model": self.model, "pooled": self.pooled.to_dict(),
                "per_draw": self.draws.to_dict("records"), "notes": list(self.notes)}

    def lines(self) -> list[str]:
        """Plain sentences for fit.txt and the report."""
        rules = ", ".join(f"{n} {k}" for k, n in self.rules.items() if n)
        out = [f"Imprecise dates: {self.m} draws of plausible windows (seed {self.seed}; rows: "
               f"{rules}); {self.model}; pooled by Rubin's rules with Barnard-Rubin df:"]
        for r in self.pooled.table.itertuples(index=False):
            out.append(f"  {r.term}: {r.estimate:.4g} (SE {r.se:.4g}, t = {r.statistic:.3g} on "
                       f"{r.df:.3g} df, p = {r.p:.3g}); SE grows {100 * (r.se_growth - 1):.3g} % "
                       f"because of date imprecision; fraction of missing information "
                       f"{r.fmi:.3g}")
        return out + [f"  note: {n}" for n in self.notes]
