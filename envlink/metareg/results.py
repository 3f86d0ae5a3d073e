"""Statistics derived from a fit: the Q-profile interval of tau², pseudo-R², predictions.

The first two are computed on first use; each returns a :class:`~envlink.metareg.attributes.Derived`: the value with the notes
that explain it, so reading one never changes another result. Formulas and
citations: docs/methods.md.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from envlink.metareg import estimators as est
from envlink.metareg.attributes import Derived
from envlink.metareg.design import new_rows
from envlink.metareg.lockstep import Together

__all__ = ["qprofile_interval", "pseudo_r2", "prediction_df", "prediction_table"]


def qprofile_interval(d: Any, *, level: float, multilevel: bool, use_numba: bool = True,
                      g0: est.GLS | None = None, together: Together | None = None,
                      ) -> Derived[tuple[float | None, float | None]]:
    """Q-profile interval of tau² (Viechtbauer 2007): ``y'P(tau²)y`` at the chi² quantiles.

    ``together``: the interval solved alongside tau² (:mod:`envlink.metareg.lockstep`).
    Otherwise each bound is root-found with :func:`~envlink.metareg.estimators.solve_q`
    (Newton steps, then Brent's method once bracketed), one pass per step.

    Examples
    --------
    >>> from envlink.metareg.design import design_from_arrays
    >>> d = design_from_arrays([0.0, 1.0, 2.0, 0.5], [0.1, 0.1, 0.1, 0.1], None, intercept=True)
    >>> ci = qprofile_interval(d, level=0.95, multilevel=False).value
    >>> ci[0] < 0.5 < ci[1]
    True
    """
    from scipy import stats

    if together is not None:
        return Derived(together.ci, together.ci_notes)
    if multilevel:
        return Derived((None, None), ("The Q-profile interval for tau² is defined for one "
                                      "variance component; the tau² interval is null for the multilevel "
                                      "model.",))
    df = d.k - d.p
    a = (1.0 - level) / 2.0
    out: list[float] = []
    notes: list[str] = []
    for target in (stats.chi2.ppf(1 - a, df), stats.chi2.ppf(a, df)):
        t, ok, _ = est.solve_q(d, float(target), tol=1e-12, max_iter=200, use_numba=use_numba,
                               g0=g0)
        if not ok:
            notes.append("The Q-profile bound did not converge; tau2_ci is approximate.")
        out.append(t)
    return Derived((out[0], out[1]), tuple(notes))


def pseudo_r2(*, fixed: bool, base_tau2: float | None, tau2: float) -> Derived[float | None]:
    """Pseudo-R² in per cent (Raudenbush 2009): ``100 max(0, (τ₀² − τ²) / τ₀²)``.

    ``base_tau2`` is τ₀² of the model without moderators by the same estimator.

    Examples
    --------
    >>> pseudo_r2(fixed=False, base_tau2=0.2, tau2=0.05).value
    75.0
    >>> pseudo_r2(fixed=False, base_tau2=0.0, tau2=0.0).notes
    ('R² is undefined: tau² of the model without moderators is 0.',)
    """
    if fixed:
        return Derived(None, ("R² is not computed for a fixed tau².",))
    if base_tau2 is not None and base_tau2 > 0:
        return Derived(max(0.0, 100.0 * (base_tau2 - tau2) / base_tau2))
    return Derived(None, ("R² is undefined: tau² of the model without moderators is 0.",))


def prediction_df(rule: str, *, k: int, p: int, df: float | None) -> float | None:
    """The df of a prediction interval's t quantile under ``rule`` (None: normal).

    ``rule`` names an entry of :data:`~envlink.metareg.vocabulary.PREDICTION_INTERVALS`:
    ``"tests"`` gives ``df`` (the coefficient tests'), ``"riley"`` gives ``k - p - 1``
    (each entry's ``info["df"]``).

    Examples
    --------
    >>> prediction_df("riley", k=10, p=1, df=None), prediction_df("tests", k=10, p=1, df=None)
    (8, None)
    """
    from envlink.errors import ModelError
    from envlink.metareg.vocabulary import PREDICTION_INTERVALS

    entry = PREDICTION_INTERVALS.parse(rule).entry
    out = entry.info["df"](k, p, df)
    if out is not None and out < 1:
        raise ModelError(f"The {entry.name!r} prediction interval needs at least 1 df; "
                         f"k = {k}, p = {p} give {out}.")
    return out


def prediction_table(d: Any, newdata: Any, *, coef: np.ndarray, vcov: np.ndarray, tau2: float,
                     df: float | None, level: float, pi_df: Any = "same") -> pd.DataFrame:
    """Predicted means with confidence and prediction intervals (Riley, Higgins & Deeks 2011).

    ``estimate ± q · se`` and ``estimate ± q' · sqrt(se² + tau²)``, ``q`` from the
    normal when ``df`` is None (z tests), else from t with ``df`` degrees of freedom;
    ``q'`` likewise from ``pi_df`` (``"same"``: ``df``; a number: t with that many df).
    ``newdata`` None predicts for the design's rows (or the mean of an intercept-only
    model).

    Examples
    --------
    >>> import numpy as np
    >>> from envlink.metareg.design import design_from_arrays
    >>> d = design_from_arrays([0.1, 0.3, 0.2], [0.01, 0.01, 0.01], None, intercept=True)
    >>> p = prediction_table(d, None, coef=np.array([0.2]), vcov=np.array([[0.0025]]),
    ...                      tau2=0.0, df=None, level=0.95)
    >>> [round(float(x), 4) for x in p.loc[0, ["estimate", "ci_low", "ci_high"]]]
    [0.2, 0.102, 0.298]
    """
    from scipy import stats

    if newdata is None and d.X.shape[1] == 0:
        Xn = np.ones((1, 1)) if d.intercept else np.zeros((1, 0))
    elif newdata is None:
        Xn = d.dense()[2]
    else:
        Xn = new_rows(d.spec, newdata, intercept=d.intercept, m=d.X.shape[1])
    mu = Xn @ coef
    se = np.sqrt(np.einsum("ij,jk,ik->i", Xn, vcov, Xn))
    a = 1.0 - (1.0 - level) / 2.0
    crit = stats.norm.ppf(a) if df is None else stats.t.ppf(a, df)
    pi_df = df if isinstance(pi_df, str) else pi_df
    pcrit = stats.norm.ppf(a) if pi_df is None else stats.t.ppf(a, pi_df)
    pse = np.sqrt(se**2 + tau2)
    return pd.DataFrame({"estimate": mu, "se": se, "ci_low": mu - crit * se,
                         "ci_high": mu + crit * se, "pi_low": mu - pcrit * pse,
                         "pi_high": mu + pcrit * pse})
