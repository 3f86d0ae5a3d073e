"""Shared pieces of the effect-size kinds: the result type, the zero-cell rules, row checks.

:data:`ZERO_CELL_RULES` is the registry of where a continuity correction goes (the
``zero_cells`` option of the count kinds, and the ``[effects] zero_cells`` key of a
project file). :mod:`envlink.effects` re-exports the public names.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple, TypeAlias

import numpy as np
from numpy.typing import ArrayLike, NDArray

from envlink.core.flags import RowFlags
from envlink.core.registry import Entry, Registry
from envlink.core.util import did_you_mean
from envlink.errors import BackTransformWarning, InputError, param_error

__all__ = ["EffectKind", "ZeroCellRule", "ZERO_CELL_RULES", "EffectResult", "BackTransformWarning"]

#: A name of :data:`envlink.effects.kinds.EFFECT_KINDS`, in any spelling (the registry is
#: the one list of the names).
EffectKind: TypeAlias = str
#: A name of :data:`ZERO_CELL_RULES`, in any spelling.
ZeroCellRule: TypeAlias = str

RowSelection = Callable[[NDArray[np.bool_], NDArray[np.bool_]], NDArray[np.bool_]]


def _zero_rows(zero: NDArray[np.bool_], bad: NDArray[np.bool_]) -> NDArray[np.bool_]:
    return zero & ~bad


def _all_rows(zero: NDArray[np.bool_], bad: NDArray[np.bool_]) -> NDArray[np.bool_]:
    return ~bad if bool((zero & ~bad).any()) else np.zeros_like(zero)


def _no_rows(zero: NDArray[np.bool_], bad: NDArray[np.bool_]) -> NDArray[np.bool_]:
    return np.zeros_like(zero)


#: Where a continuity correction goes. Each entry's function takes the boolean arrays
#: ``zero`` (valid rows with a zero cell) and ``bad`` (rows without a value) and
#: returns the rows to correct.
ZERO_CELL_RULES: Registry[RowSelection] = Registry("zero-cell rule", param="zero_cells", caller="effect_sizes")
ZERO_CELL_RULES.add(Entry("zero_rows", "the correction goes to the rows with a zero cell (the default)",
                          obj=_zero_rows))
ZERO_CELL_RULES.add(Entry("all_rows", "the correction goes to every valid row whenever any row has a zero cell",
                          obj=_all_rows))
ZERO_CELL_RULES.add(Entry("none", "no correction: rows with a zero cell get NaN and the flag `zero_cell`",
                          obj=_no_rows))


class EffectResult(NamedTuple):
    """Effect sizes of one kind: three float64 / str arrays of the input's length."""

    effect: NDArray[np.float64]
    variance: NDArray[np.float64]
    flags: NDArray[np.object_]


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
    """One flag text per row from (code, rows) items, in item order (see :mod:`envlink.core.flags`)."""
    flags = RowFlags(n)
    for code, mask in items:
        flags.add(mask, code)
    return flags.render()


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


def zero_cell_rule(caller: str, zero_cells: str) -> str:
    """The canonical name of a zero-cell rule (any spelling), or the parameter message of ``caller``.

    Examples
    --------
    >>> zero_cell_rule("logit_proportion", "All-Rows")
    'all_rows'
    """
    try:
        return ZERO_CELL_RULES.parse(zero_cells).name
    except InputError:
        hint = did_you_mean(zero_cells, ZERO_CELL_RULES.names()) if isinstance(zero_cells, str) else ""
        raise InputError(
            str(param_error("zero_cells", caller, ZERO_CELL_RULES.allowed(), zero_cells)) + hint
        ) from None


def _check_correction(caller: str, correction: float, zero_cells: str) -> RowSelection:
    """Check the count kinds' options; return the zero-cell rule's row selection."""
    rule = ZERO_CELL_RULES[zero_cell_rule(caller, zero_cells)].obj
    ok = isinstance(correction, int | float | np.floating) and not isinstance(correction, bool)
    if not (ok and np.isfinite(correction) and correction > 0):
        raise param_error("correction", caller, "a positive number", correction)
    assert rule is not None
    return rule
