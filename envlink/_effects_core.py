"""Shared pieces of the effect-size kinds: the result type, type aliases and row checks.

Private to :mod:`envlink.effects`, which re-exports the public names.
"""

from __future__ import annotations

from typing import Literal, NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from envlink.errors import EnvlinkWarning, InputError, param_error

__all__ = ["EffectKind", "ZeroCellRule", "EffectResult", "BackTransformWarning"]

EffectKind = Literal[
    "logit_proportion", "arcsine_proportion", "freeman_tukey", "log_odds_ratio",
    "log_risk_ratio", "hedges_g", "log_response_ratio", "fisher_z", "ln_vr", "ln_cvr",
]  # fmt: skip
#: where a continuity correction goes: rows with a zero cell, every row when any row
#: has one, or nowhere (zero-cell rows then get no value)
ZeroCellRule = Literal["zero_rows", "all_rows", "none"]
_ZERO_RULES = ("zero_rows", "all_rows", "none")


class EffectResult(NamedTuple):
    """Effect sizes of one kind: three float64 / str arrays of the input's length."""

    effect: NDArray[np.float64]
    variance: NDArray[np.float64]
    flags: NDArray[np.object_]


class BackTransformWarning(EnvlinkWarning):
    """A back-transformation whose result needs care (see its docstring)."""


def _floats(caller: str, **arrays: ArrayLike) -> tuple[NDArray[np.float64], ...]:
    try:
        out = [np.asarray(a, dtype=np.float64) for a in arrays.values()]
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"{caller} needs numbers for {', '.join(arrays)}; {exc}. "
            "Tables go through envlink.effect_sizes, which flags unparseable cells."
        ) from exc
    return tuple(np.atleast_1d(a) for a in np.broadcast_arrays(*out))


def _flags(n: int, items: list[tuple[str, NDArray[np.bool_]]]) -> NDArray[np.object_]:
    out = np.full(n, "", dtype=object)
    for code, mask in items:
        sel = np.flatnonzero(mask)
        if sel.size:
            cur = out[sel]
            out[sel] = np.where(cur == "", code, cur + ";" + code)
    return out


def _missing(*arrays: NDArray[np.float64]) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    missing = np.zeros(arrays[0].shape, dtype=bool)
    infinite = np.zeros(arrays[0].shape, dtype=bool)
    for a in arrays:
        missing |= np.isnan(a)
        infinite |= np.isinf(a)
    return missing, infinite


def _finish(
    effect: NDArray[np.float64],
    variance: NDArray[np.float64],
    bad: NDArray[np.bool_],
    items: list[tuple[str, NDArray[np.bool_]]],
) -> EffectResult:
    overflow = ~bad & ~(np.isfinite(effect) & np.isfinite(variance))
    items = [*items, ("nonfinite_result", overflow)]  # e.g. numbers too large for float64
    bad = bad | overflow
    effect = np.where(bad, np.nan, effect)
    variance = np.where(bad, np.nan, variance)
    return EffectResult(effect, variance, _flags(effect.size, items))


def _check_correction(caller: str, correction: float, zero_cells: str) -> None:
    if zero_cells not in _ZERO_RULES:
        raise param_error("zero_cells", caller, "one of " + ", ".join(map(repr, _ZERO_RULES)), zero_cells)
    ok = isinstance(correction, int | float | np.floating) and not isinstance(correction, bool)
    if not (ok and np.isfinite(correction) and correction > 0):
        raise param_error("correction", caller, "a positive number", correction)
