"""Effect sizes and their sampling variances: per row from summary data, per group from records.

Every kind is a pure NumPy function over arrays that returns an
:class:`~envlink.effects.core.EffectResult` (``effect``, ``variance``, ``flags``).
:func:`effect_sizes` applies a kind to the columns of a table; :func:`group_effects`
computes effects per group from raw records. The modules:

- :mod:`envlink.effects.kinds`: :data:`EFFECT_KINDS`, the registry of kinds (their
  functions, inputs and options);
- :mod:`envlink.effects.core`: the result type, :data:`ZERO_CELL_RULES`, row checks;
- :mod:`envlink.effects.counts`: kinds from counts (proportions, odds and risk ratios);
- :mod:`envlink.effects.means`: kinds from means, SDs and correlations;
- :mod:`envlink.effects.table`: :func:`effect_sizes` over a table's columns;
- :mod:`envlink.effects.groups`: :func:`group_effects` from raw records.

Names are loaded on first access, so reading the registries (as the project file's
schema does) imports neither SciPy nor pandas. Each kind's array function is
``envlink.effects.<kind>`` under its canonical name, looked up in
:data:`EFFECT_KINDS` (a kind registered there needs no line here).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from envlink.core.lazy import LazyFunction
from envlink.effects import kinds as _kinds

if TYPE_CHECKING:
    from envlink.effects.core import (
        ZERO_CELL_RULES,
        BackTransformWarning,
        EffectKind,
        EffectResult,
        ZeroCellRule,
    )
    from envlink.effects.counts import freeman_tukey_inverse
    from envlink.effects.groups import group_effects
    from envlink.effects.kinds import EFFECT_KINDS
    from envlink.effects.means import hedges_j
    from envlink.effects.table import effect_sizes

#: public name -> module that defines it
_LAZY: dict[str, str] = {
    "EffectKind": "envlink.effects.core",
    "ZeroCellRule": "envlink.effects.core",
    "EffectResult": "envlink.effects.core",
    "BackTransformWarning": "envlink.effects.core",
    "ZERO_CELL_RULES": "envlink.effects.core",
    "EFFECT_KINDS": "envlink.effects.kinds",
    "freeman_tukey_inverse": "envlink.effects.counts",
    "hedges_j": "envlink.effects.means",
    "effect_sizes": "envlink.effects.table",
    "group_effects": "envlink.effects.groups",
}

__all__ = [
    "EffectKind",
    "ZeroCellRule",
    "EffectResult",
    "BackTransformWarning",
    "ZERO_CELL_RULES",
    "EFFECT_KINDS",
    "freeman_tukey_inverse",
    "hedges_j",
    "effect_sizes",
    "group_effects",
    *_kinds.EFFECT_KINDS.names(),  # each kind's array function, e.g. logit_proportion
]


def _kind_function(name: str) -> Any:
    """The array function of the kind registered under ``name`` exactly, or None."""
    if name not in _kinds.EFFECT_KINDS.names():
        return None
    func = _kinds.EFFECT_KINDS[name].obj
    return func.resolve() if isinstance(func, LazyFunction) else func


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    func = _kind_function(name)
    if func is not None:  # not cached here: the registry stays the one list
        return func
    raise AttributeError(f"module 'envlink.effects' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__) | set(_kinds.EFFECT_KINDS.names()))
