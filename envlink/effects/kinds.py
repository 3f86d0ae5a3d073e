"""The effect-size kinds: one registry that every interface reads (API, project file, docs).

Each entry of :data:`EFFECT_KINDS` holds the kind's function (imported on its first
call, so reading the registry costs no SciPy or pandas import) and these facts in
``entry.info``:

- ``roles``: the kind's inputs in the order its function takes them (the column
  keywords of :func:`envlink.effect_sizes`, the keys of a project's
  ``[effects.columns]``);
- ``options``: the keyword options it accepts, of ``correction``, ``zero_cells``,
  ``exact`` and ``bias_correction``;
- ``groupwise``: whether :func:`envlink.group_effects` computes it per group from
  raw records.

Names follow the registries' spelling policy (:mod:`envlink.core.registry`):
``Logit-Proportion`` is ``logit_proportion``. Outputs record the canonical name.

Examples
--------
>>> entry = EFFECT_KINDS.parse("Log-Odds-Ratio").entry
>>> entry.name, entry.info["roles"], entry.info["options"]
('log_odds_ratio', ('events1', 'total1', 'events2', 'total2'), ('correction', 'zero_cells'))
>>> [e.name for e in EFFECT_KINDS if e.info["groupwise"]]
['logit_proportion', 'arcsine_proportion', 'freeman_tukey', 'hedges_g', 'log_response_ratio', 'fisher_z', 'ln_vr', 'ln_cvr']
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from envlink.core.lazy import LazyFunction
from envlink.core.registry import Entry, Registry
from envlink.core.util import did_you_mean
from envlink.errors import InputError, param_error

__all__ = ["EFFECT_KINDS", "OPTIONS", "kind_entry"]

#: The keyword options a kind may accept.
OPTIONS = ("correction", "zero_cells", "exact", "bias_correction")

#: Effect-size kinds: name -> function, with ``roles``, ``options`` and ``groupwise`` facts.
EFFECT_KINDS: Registry[Callable[..., Any]] = Registry("effect kind", param="kind", caller="effect_sizes")

_PROPORTION = ("events", "total")
_TWO_BY_TWO = ("events1", "total1", "events2", "total2")
_MEANS = ("mean1", "sd1", "n1", "mean2", "sd2", "n2")
_COUNT_OPTIONS = ("correction", "zero_cells")


def _kind(name: str, module: str, roles: tuple[str, ...], summary: str, *,
          options: tuple[str, ...] = (), groupwise: bool = False) -> None:
    EFFECT_KINDS.add(Entry(
        name, f"{summary}; inputs {', '.join(roles)}"
        + (f"; options {', '.join(options)}" if options else "")
        + ("; also per group from raw records" if groupwise else ""),
        obj=LazyFunction(f"envlink.effects.{module}:{name}"),
        info={"roles": roles, "options": options, "groupwise": groupwise},
    ))  # fmt: skip


_kind("logit_proportion", "counts", _PROPORTION, "logit of a proportion, ln(x / (n − x))",
      options=_COUNT_OPTIONS, groupwise=True)
_kind("arcsine_proportion", "counts", _PROPORTION, "arcsine square-root proportion, asin(√(x / n))",
      groupwise=True)
_kind("freeman_tukey", "counts", _PROPORTION,
      "Freeman-Tukey double arcsine of a proportion, halved to the scale of asin(√p)", groupwise=True)
_kind("log_odds_ratio", "counts", _TWO_BY_TWO, "log odds ratio of group 1 against group 2",
      options=_COUNT_OPTIONS)
_kind("log_risk_ratio", "counts", _TWO_BY_TWO, "log risk ratio of group 1 against group 2",
      options=_COUNT_OPTIONS)
_kind("hedges_g", "means", _MEANS, "Hedges' g, the bias-corrected standardised mean difference",
      options=("exact",), groupwise=True)
_kind("log_response_ratio", "means", _MEANS, "log response ratio of the means, ln(m1 / m2)",
      options=("bias_correction",), groupwise=True)
_kind("fisher_z", "means", ("r", "n"), "Fisher's z of a correlation, atanh(r)", groupwise=True)
_kind("ln_vr", "means", ("sd1", "n1", "sd2", "n2"), "log ratio of the SDs (lnVR)", groupwise=True)
_kind("ln_cvr", "means", _MEANS, "log ratio of the coefficients of variation (lnCVR)",
      groupwise=True)


def kind_entry(kind: str, caller: str = "effect_sizes", *, groupwise: bool = False) -> Entry[Callable[..., Any]]:
    """The entry of ``kind`` (any spelling), or the parameter message of ``caller``.

    With ``groupwise`` only kinds that :func:`envlink.group_effects` computes are allowed.

    Examples
    --------
    >>> kind_entry("Fisher_Z", "group_effects", groupwise=True).name
    'fisher_z'
    >>> kind_entry("log_odds_ratio", "group_effects", groupwise=True)
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The 'kind' parameter of group_effects must be one of 'logit_proportion', 'arcsine_proportion', 'freeman_tukey', 'hedges_g', 'log_response_ratio', 'fisher_z', 'ln_vr', 'ln_cvr'; got 'log_odds_ratio'.
    """
    names = [e.name for e in EFFECT_KINDS if e.info.get("groupwise") or not groupwise]
    entry = EFFECT_KINDS[kind] if EFFECT_KINDS.accepts(kind) else None
    if entry is None or entry.name not in names:
        allowed = "one of " + ", ".join(repr(n) for n in names)
        hint = did_you_mean(kind, names) if isinstance(kind, str) and entry is None else ""
        raise InputError(str(param_error("kind", caller, allowed, kind)) + hint)
    return entry
