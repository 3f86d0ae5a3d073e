"""Constants subtracted from the moderators and the effects before one-pass sums (exact, better conditioned).

With an intercept in the model, summing ``x - c`` instead of ``x`` is a change of
coordinates of determinant 1, and summing ``y - c`` leaves ``Q``, the likelihood and
every trace unchanged (``P 1 = 0``): only the coefficients move, and
:func:`envlink.metareg.estimators.gls` maps them back. Both keep the sums of
:mod:`envlink.metareg._kernels` from losing digits to cancellation (calendar years or
kelvin as moderators; effects far from 0 with tiny sampling variances).
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["moderator_shift", "effect_shift", "FIRST_ROWS"]

#: rows whose mean is the shift (any constant is exact; a typical value conditions best)
FIRST_ROWS = 1 << 10


def _is_dask(a: object) -> bool:
    return type(a).__module__.startswith("dask")


def moderator_shift(X: Any, intercept: bool) -> np.ndarray | None:
    """Constants to subtract from the moderator columns: the mean of their first rows.

    With an intercept, summing ``x - c`` instead of ``x`` is an exact change of
    coordinates of determinant 1 (the likelihood, ``Q`` and the traces are unchanged;
    :func:`~envlink.metareg.estimators.gls` maps the coefficients back), and it keeps
    the sums well conditioned for moderators far from 0 (calendar years, kelvin).
    None without an intercept or moderators.
    """
    if not intercept or X.shape[1] == 0 or X.shape[0] == 0:
        return None
    if _is_dask(X):  # one small compute per array, not one per pass
        return _dask_shift(X.name, X)
    return np.mean(np.asarray(X[:FIRST_ROWS], dtype=np.float64), axis=0)


def effect_shift(y: Any, intercept: bool) -> float:
    """The constant to subtract from the effects: the mean of their first rows (0 without an intercept).

    With an intercept, ``Q``, the likelihood and every trace are unchanged when the
    effects move by a constant (``P 1 = 0``); only the intercept moves, and
    :func:`~envlink.metareg.estimators.gls` adds the constant back. Summing effects
    near 0 keeps ``Σ w y²`` from dwarfing ``Q`` when the sampling variances are tiny
    (one-pass sums then lose no digits to cancellation).
    """
    if not intercept or y.shape[0] == 0:
        return 0.0
    if _is_dask(y):
        return float(_dask_shift(y.name, y[:, None])[0])
    first = np.asarray(y[:FIRST_ROWS], dtype=np.float64)
    first = first[np.isfinite(first)]
    return float(first.mean()) if first.size else 0.0


_SHIFTS: dict[str, np.ndarray] = {}


def _dask_shift(name: str, X: Any) -> np.ndarray:
    if name not in _SHIFTS:
        if len(_SHIFTS) > 16:
            _SHIFTS.clear()
        _SHIFTS[name] = np.mean(np.asarray(X[:FIRST_ROWS].compute(), dtype=np.float64), axis=0)
    return _SHIFTS[name]


