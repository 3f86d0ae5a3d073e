"""Degenerate models, named before they are computed: sizes beyond float64, flat random effects.

Two checks run on every design before it is fitted (:meth:`MetaRegression.fit`):

- :func:`check_magnitudes`: the fit squares effects (tau² is on the scale of the
  effects squared) and squares the weights ``1 / v``; values whose squares leave
  float64's range would give overflows, a null estimate and a note about iterations.
  Effects and moderator values up to 1e75 in size, variances from 1e-150 to 1e150 and
  ratios |effect| / variance up to 1e145 are fitted; beyond, the rows are named (:class:`~envlink.errors.InvalidValueError`,
  bad input). Effect sizes on any usual scale are far inside these bounds.
- :func:`check_random_effect`: a random effect whose column has one level (the
  between-level variance cannot be told from the intercept) or one row per level
  (the two variance components cannot be told apart) has a flat likelihood in one
  component; it is refused, naming the column (:class:`~envlink.errors.InputError`).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from envlink.errors import InputError, InvalidValueError
from envlink.metareg.formula import rows_text

__all__ = ["check_magnitudes", "check_random_effect", "EFFECT_LIMIT", "VARIANCE_LIMITS",
           "RATIO_LIMIT"]

#: Largest effect (and moderator value) in size that a fit squares safely in float64.
EFFECT_LIMIT = 1e75
#: Smallest and largest sampling variance whose weight and squared weight stay in float64.
VARIANCE_LIMITS = (1e-150, 1e150)
#: Largest |effect| / variance: its square, summed over rows, stays in float64.
RATIO_LIMIT = 1e145
_BLOCK = 1 << 12


def _positions(d: Any, i: np.ndarray) -> np.ndarray:
    """Input positions of the design's rows ``i`` (the design holds the included rows only)."""
    keep = getattr(d, "keep", None)
    return np.flatnonzero(keep)[i] if keep is not None else i


def _where(d: Any, i: np.ndarray) -> str:
    return rows_text(_positions(d, i), getattr(d, "all_labels", None))


def check_magnitudes(d: Any, effect: str = "y", variance: str = "v") -> None:
    """Refuse effects, variances and moderator values whose squares leave float64's range.

    ``d`` is a :class:`~envlink.metareg.design.Design` (built from a table or from
    NumPy arrays, which call this); ``effect`` and ``variance`` name its columns in
    messages. Dask designs are not checked here.

    Raises
    ------
    InvalidValueError
        The first kind of value out of range, with its rows (counted from 1).

    Examples
    --------
    >>> import numpy as np
    >>> from envlink.metareg.design import design_from_arrays
    >>> design_from_arrays([0.1, 1e308, 0.3], [0.01, 0.02, 0.03], None, intercept=True)
    Traceback (most recent call last):
    ...
    envlink.errors.InvalidValueError: Effect 'y' is too large for a meta-regression in row 2 (1e+308): ...
    """
    if not all(isinstance(a, np.ndarray) for a in (d.y, d.v, d.X)):
        return
    y, v, X = d.y, d.v, d.X
    if y.size == 0:
        return
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):  # reductions: no copies
        ymax = max(abs(float(y.max())), abs(float(y.min())))
        vmin, vmax = float(v.min()), float(v.max())
        xmax = max(abs(float(X.max())), abs(float(X.min()))) if X.size else 0.0
        if (ymax <= EFFECT_LIMIT and VARIANCE_LIMITS[0] <= vmin and vmax <= VARIANCE_LIMITS[1]
                and ymax / vmin <= RATIO_LIMIT and xmax <= EFFECT_LIMIT):
            return
    for lo in range(0, y.shape[0], _BLOCK):  # find the rows: block-sized temporaries only
        sl = slice(lo, lo + _BLOCK)
        yb = np.abs(np.asarray(y[sl], dtype=np.float64))
        vb = np.asarray(v[sl], dtype=np.float64)
        xb = np.abs(np.asarray(X[sl], dtype=np.float64))
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            ok = (yb.size == 0 or (yb.max() <= EFFECT_LIMIT and vb.min() >= VARIANCE_LIMITS[0]
                                   and vb.max() <= VARIANCE_LIMITS[1]
                                   and (yb / vb).max() <= RATIO_LIMIT))
        if not (ok and (xb.size == 0 or xb.max() <= EFFECT_LIMIT)):
            _refuse(d, lo, yb, vb, xb, effect, variance)


def _refuse(d: Any, lo: int, ay: np.ndarray, v: np.ndarray, ax: np.ndarray, effect: str,
            variance: str) -> None:
    """Raise the message for the first kind of value out of range in one block (rows from ``lo``)."""
    def where(bad: np.ndarray) -> str:
        return _where(d, np.flatnonzero(bad) + lo)

    big = ay > EFFECT_LIMIT
    if big.any():
        i = int(np.flatnonzero(big)[0])
        raise InvalidValueError(
            f"Effect {effect!r} is too large for a meta-regression in {where(big)} "
            f"({float(d.y[lo + i]):.4g}): the fit squares the effects, and beyond "
            f"{EFFECT_LIMIT:.0e} in size their squares leave the range of float64. Check these "
            "rows (a value in the wrong column or unit?), or rescale the effects."
        )
    low, high = VARIANCE_LIMITS
    out = (v < low) | (v > high)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        raise InvalidValueError(
            f"Sampling variance {variance!r} is out of the range a meta-regression can weigh in "
            f"{where(out)} ({v[i]:.4g}): the fit squares the weights 1 / v, so variances must "
            f"lie between {low:.0e} and {high:.0e}. Check these rows, or rescale."
        )
    huge = ay / v > RATIO_LIMIT
    if huge.any():
        i = int(np.flatnonzero(huge)[0])
        raise InvalidValueError(
            f"Effect {effect!r} and sampling variance {variance!r} overflow the fit's weighted "
            f"sums in {where(huge)} (effect {float(d.y[lo + i]):.4g} with variance {v[i]:.4g}): "
            f"the squares of effect / variance must stay within float64, so the ratio may be at "
            f"most {RATIO_LIMIT:.0e}. Check these rows (a standard error squared twice?)."
        )
    bigx = ax > EFFECT_LIMIT
    r, j = (int(a[0]) for a in np.nonzero(bigx))
    term = d.names[j + (1 if d.intercept else 0)]
    raise InvalidValueError(
        f"Moderator term {term!r} is too large for a meta-regression in {where(np.asarray(bigx.any(axis=1)))} "
        f"({float(d.X[lo + r, j]):.4g}): beyond {EFFECT_LIMIT:.0e} in size its squares leave the "
        "range of float64; rescale it (e.g. other units)."
    )


def check_random_effect(codes: np.ndarray, column: str) -> None:
    """Refuse a random effect whose column has one level, or one row per level.

    Parameters
    ----------
    codes : numpy.ndarray of int
        The level of each row that enters the fit (0, 1, ...).
    column : str
        The column, for the message.

    Raises
    ------
    InputError
        Naming the column, the number of levels and rows, and what to do.

    Examples
    --------
    >>> import numpy as np
    >>> check_random_effect(np.array([0, 0, 1, 1]), "study")
    >>> check_random_effect(np.zeros(5, dtype=int), "study")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The random effect of 'study' cannot be estimated: all 5 effects ...
    """
    k = int(codes.shape[0])
    levels = int(np.unique(codes).size)
    if levels == 1:
        raise InputError(
            f"The random effect of {column!r} cannot be estimated: all {k} effects that enter "
            f"the fit share one {column!r}, so a between-{column} variance cannot be told apart "
            f"from the intercept (the likelihood is flat in it). Leave out nested={column!r}, "
            "or use a column with several levels."
        )
    if levels == k:
        raise InputError(
            f"The random effect of {column!r} cannot be estimated: each of the {k} effects that "
            f"enter the fit has its own {column!r}, so the between- and within-{column} variances "
            f"cannot be told apart (the likelihood is flat along their sum). Leave out "
            f"nested={column!r} (the plain random-effects model is this model), or use a "
            "column that groups several effects."
        )
