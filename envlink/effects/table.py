"""Effect sizes over a table's columns: :func:`effect_sizes` adds effect, variance and flags.

The kind is looked up in :data:`envlink.effects.kinds.EFFECT_KINDS`, which gives its
function, the column keywords it needs (its roles) and the options it accepts. Rows
that cannot give a value (events above the total, a negative SD, n < 2, a mean <= 0
for a ratio of means, ``|r| > 1``, missing or unreadable numbers) get ``NaN`` and a
flag explaining why; no row raises. Flags are short codes joined by ``;`` (``""``
when a row has none). The formulas and their citations are in ``docs/methods.md``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink.core.flags import join_flags, split_flags
from envlink.effects.core import EffectKind, ZeroCellRule
from envlink.effects.kinds import kind_entry
from envlink.errors import InputError, param_error
from envlink.tables import parse_numbers, require_columns

__all__ = ["effect_sizes"]


def _mark_unreadable(flags: NDArray[np.object_], unreadable: NDArray[np.bool_],
                     blank: NDArray[np.bool_]) -> NDArray[np.object_]:
    """Name rows with a cell that is not a number; ``missing_input`` stays only for blanks."""
    out = flags.copy()
    for i in np.flatnonzero(unreadable):
        codes = [c for c in split_flags(flags[i]) if c != "missing_input" or blank[i]]
        out[i] = join_flags(["unreadable_number", *codes])
    return out


def effect_sizes(
    table: pd.DataFrame,
    kind: EffectKind,
    *,
    name: str = "effect",
    variance_name: str = "variance",
    flags_name: str = "effect_flags",
    correction: float | None = None,
    zero_cells: ZeroCellRule | None = None,
    exact: bool | None = None,
    bias_correction: bool | None = None,
    **columns: str,
) -> pd.DataFrame:
    """Add an effect size, its sampling variance and QA flags to a table.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per effect. Numbers may be text (full-width digits, decimal commas
        as in ``12,5`` are read); a blank cell gives a NaN row flagged
        ``missing_input``, a cell that is not a number one flagged ``unreadable_number``.
    kind : str
        An effect kind of :data:`envlink.effects.kinds.EFFECT_KINDS` (``docs/methods.md``
        lists them), in any spelling (``Logit-Proportion``).
    name, variance_name, flags_name : str
        Names of the three added columns (they must not exist yet).
    correction, zero_cells : optional
        Continuity correction for the count kinds (default 0.5 on rows with a zero
        cell); see :func:`logit_proportion`.
    exact : bool, optional
        ``hedges_g`` only: exact (default) or approximate ``J``.
    bias_correction : bool, optional
        ``log_response_ratio`` only: Lajeunesse (2015) correction (default off).
    **columns : str
        The table's column for each input of the kind, by keyword: ``events=``,
        ``total=``; ``events1=, total1=, events2=, total2=``;
        ``mean1=, sd1=, n1=, mean2=, sd2=, n2=``; ``sd1=, n1=, sd2=, n2=``; ``r=, n=``.

    Returns
    -------
    pandas.DataFrame
        A new frame: every input row and column in order, plus the three columns.

    Raises
    ------
    InputError
        Unknown kind, missing or extra column keywords, a column the table lacks, an
        option the kind does not take, or an output name already in the table.

    Examples
    --------
    >>> t = pd.DataFrame({"site": ["a", "b", "c"], "sick": ["3", "", "ten"], "seen": [40, 25, 30]})
    >>> out = effect_sizes(t, "logit_proportion", events="sick", total="seen")
    >>> out[["site", "effect", "effect_flags"]].round(4).to_dict("list")
    {'site': ['a', 'b', 'c'], 'effect': [-2.5123, nan, nan], 'effect_flags': ['', 'missing_input', 'unreadable_number']}
    """
    entry = kind_entry(kind)
    func, needed, takes, label = entry.obj, entry.info["roles"], entry.info["options"], entry.name
    assert func is not None
    given = {"correction": correction, "zero_cells": zero_cells, "exact": exact, "bias_correction": bias_correction}
    for opt, value in given.items():
        if value is not None and opt not in takes:
            allowed = "left unset for this kind" if not takes else "unset; it takes only " + ", ".join(takes)
            raise param_error(opt, f"effect_sizes(kind={label!r})", allowed, value)
    extra = sorted(set(columns) - set(needed))
    lacking = [k for k in needed if k not in columns]
    if extra or lacking:
        raise InputError(
            f"effect_sizes(kind={label!r}) takes the column keywords {', '.join(needed)}"
            + (f"; missing {', '.join(lacking)}" if lacking else "")
            + (f"; unknown {', '.join(extra)}" if extra else "")
            + f". Example: effect_sizes(table, {label!r}, "
            + ", ".join(f"{k}='<column>'" for k in needed)
            + ")."
        )
    require_columns(table, [columns[k] for k in needed])
    for out_name in (name, variance_name, flags_name):
        if out_name in table.columns:
            raise InputError(
                f"The table already has a column {out_name!r}; choose other output names "
                "with name=, variance_name= or flags_name=."
            )
    parsed = {k: parse_numbers(table[columns[k]]) for k in needed}
    arrays = {k: v for k, (v, _) in parsed.items()}
    unreadable = np.logical_or.reduce([u for _, u in parsed.values()])
    blank = np.logical_or.reduce([np.isnan(v) & ~u for v, u in parsed.values()])
    opts = {k: v for k, v in given.items() if v is not None}
    res = func(*arrays.values(), **opts)
    flags = _mark_unreadable(res.flags, unreadable, blank)
    out = table.copy()
    out[name] = res.effect
    out[variance_name] = res.variance
    out[flags_name] = pd.Series(flags, index=table.index, dtype=object).astype(str)
    return out

