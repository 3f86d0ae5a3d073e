"""Effect sizes per group from raw records (one row per observation), in memory or streamed.

A table in memory is summarised with :func:`pandas.factorize` and :func:`numpy.bincount`
(a few passes over the records however many groups there are). Records in Parquet
files (a file, a folder, a glob or a list) are summarised by
:mod:`envlink.effects.streaming` without holding them in memory: by DuckDB when it is
installed, else (or with ``client=``) by Dask, row group by row group. Both give the
same per-group summary, from which the effect sizes, variances and flags are computed
alike. The kinds it computes are the entries of :data:`envlink.effects.kinds.EFFECT_KINDS`
with ``info["groupwise"]``; their roles say which summary feeds them (``events,
total``: the 1s of a 0/1 outcome; ``r, n``: Pearson's r of two columns; means, SDs
and sizes: a value column in two arms of each group). Re-exported by :mod:`envlink.effects`.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from typing import Any, TypeAlias

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink.core.flags import add_flag
from envlink.effects.core import EffectResult, ZeroCellRule, zero_cell_rule
from envlink.effects.kinds import kind_entry
from envlink.effects.summaries import MEANS, summarise_records, summary_columns
from envlink.errors import InputError, param_error

__all__ = ["GroupKind", "group_effects"]

#: A kind with ``info["groupwise"]`` in :data:`~envlink.effects.kinds.EFFECT_KINDS`, in any
#: spelling (the registry is the one list of the names).
GroupKind: TypeAlias = str


def _finish(keys: pd.Index, s: dict[str, NDArray[Any]], kind: Callable[..., EffectResult],
            roles: tuple[str, ...], options: dict[str, Any], names: list[str]) -> pd.DataFrame:
    """The output table from a summary: ``n``, ``n_excluded`` (and ``non_binary`` for an
    outcome), then ``events`` / ``r`` and ``constant`` / the arms' sizes, means and SDs."""
    n = s["n"]
    with np.errstate(all="ignore"):
        if "events" in s:
            added = {"events": s["events"]}
            res = kind(s["events"], n, **options)
        elif "r" in s:
            constant = s["constant"] & (n > 3)
            r = s["r"]
            res = kind(np.where(constant | (n <= 3), 0.0, r), n, **options)  # small n: flag only
            res = EffectResult(np.where(constant, np.nan, res.effect),
                               np.where(constant, np.nan, res.variance), res.flags)
            add_flag(res.flags, constant, "zero_variance_in_group")
            added = {"r": np.where(constant | (n < 2), np.nan, r)}
        else:
            added = {c: s[c] for c in MEANS[1]}
            res = kind(*[s[role] for role in roles], **options)
    flags = res.flags
    add_flag(flags, s["n_excluded"] > 0, "records_excluded")
    if "non_binary" in s:
        add_flag(flags, s["non_binary"] > 0, "outcome_not_binary")
    add_flag(flags, np.asarray(keys.isna()), "missing_group")
    group, name, variance_name, flags_name = names
    return pd.DataFrame({
        group: keys, "n": n, "n_excluded": s["n_excluded"], **added,
        name: res.effect, variance_name: res.variance,
        flags_name: pd.Series(flags, dtype=object).astype(str),
    })  # fmt: skip


def _columns(kind: str, kind_cols: tuple[str, ...], given: dict[str, Any]) -> list[str]:
    """The records' columns the kind reads (``outcome``; ``x`` and ``y``; ``value`` and ``arm``)."""
    wanted = {"outcome": "outcome= (a 0/1 column)", "x": "x= and y= (two columns)",
              "value": "value= and arm= (a value column and the column naming each record's arm)"}
    if any(given[c] is None for c in kind_cols) or any(
            given[c] is not None for c in given if c not in kind_cols):
        others = " or ".join(f"{c}=" for c in given if c not in kind_cols)
        raise InputError(f"group_effects(kind={kind!r}) needs {wanted[kind_cols[0]]} and no "
                         f"{others}.")
    return [str(given[c]) for c in kind_cols]


def _check_arms(kind: str, kind_cols: tuple[str, ...], arms: Any) -> tuple[Any, Any] | None:
    if kind_cols != MEANS[0]:
        if arms is not None:
            raise InputError(f"group_effects(kind={kind!r}) takes no arms=.")
        return None
    if not (isinstance(arms, list | tuple) and len(arms) == 2 and arms[0] != arms[1]):
        raise param_error("arms", "group_effects", "two different labels of the arm column: "
                          "(group 1, group 2), e.g. ('treatment', 'control')", arms)
    return arms[0], arms[1]


def group_effects(
    records: pd.DataFrame | str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    group: str,
    kind: GroupKind,
    *,
    x: str | None = None,
    y: str | None = None,
    outcome: str | None = None,
    value: str | None = None,
    arm: str | None = None,
    arms: tuple[Any, Any] | None = None,
    name: str = "effect",
    variance_name: str = "variance",
    flags_name: str = "effect_flags",
    correction: float = 0.5,
    zero_cells: ZeroCellRule = "zero_rows",
    exact: bool = True,
    bias_correction: bool = False,
    client: Any = None,
) -> pd.DataFrame:
    """One effect size per group of raw records.

    Parameters
    ----------
    records : pandas.DataFrame, or path-like, or a sequence of paths
        One row per observation: a table in memory, or Parquet files (a file, a
        folder searched recursively, a glob, or a list; read in name order) that are
        streamed, never held in memory whole (:mod:`envlink.effects.streaming`).
    group : str
        Column whose values define the groups. Records with a missing group value
        (or blank text: an empty CSV cell) form one group of their own, flagged
        ``missing_group``, its group value missing.
    kind : str
        A kind of :data:`~envlink.effects.kinds.EFFECT_KINDS` marked groupwise, in
        any spelling.
        ``fisher_z``: Pearson's r between columns ``x`` and ``y`` within each group,
        then ``atanh(r)`` with variance ``1 / (n - 3)`` (groups with ``n <= 3`` are
        flagged and get NaN; so do groups where ``x`` or ``y`` is constant, flag
        ``zero_variance_in_group``). ``logit_proportion``, ``arcsine_proportion``,
        ``freeman_tukey``: the share of 1s in the 0/1 column ``outcome`` (True/False
        work too). ``hedges_g``, ``log_response_ratio``, ``ln_vr``, ``ln_cvr``: the
        size, mean and sample SD of column ``value`` in the records whose ``arm`` is
        ``arms[0]`` (group 1) and ``arms[1]`` (group 2), passed to the kind of that name.
    x, y, outcome, value, arm : str, optional
        Columns, as the kind needs.
    arms : (label, label), optional
        The arm labels of group 1 and group 2 (two-arm kinds only); records of any
        other arm are excluded.
    name, variance_name, flags_name : str
        Names of the effect, variance and flag columns.
    correction, zero_cells, exact, bias_correction
        Options of the kinds that take them (see :mod:`envlink.effects`).
    client : dask.distributed.Client or str, optional
        Summarise Parquet records on this Dask cluster (or scheduler address).

    Returns
    -------
    pandas.DataFrame
        One row per group, in order of first appearance: the group value, ``n``
        (records used), ``n_excluded`` (records with a missing value, a value of an
        outcome that is not 0/1, or another arm; flag ``records_excluded``, or
        ``outcome_not_binary``), ``events`` / ``r`` / the arms' ``n1, mean1, sd1, n2,
        mean2, sd2``, then the effect, variance and flags.

    Examples
    --------
    >>> rec = pd.DataFrame({"reef": list("aaaaabbb"), "ill": [1, 0, 0, 1, 0, 1, 1, 0]})
    >>> out = group_effects(rec, "reef", "logit_proportion", outcome="ill")
    >>> out[["reef", "n", "events", "effect"]].round(4).to_dict("list")
    {'reef': ['a', 'b'], 'n': [5, 3], 'events': [2, 2], 'effect': [-0.4055, 0.6931]}
    >>> rec = pd.DataFrame({"site": ["s"] * 6, "arm": ["t", "t", "t", "c", "c", "c"],
    ...                     "mass": [5.0, 6.0, 7.0, 4.0, 5.0, 6.0]})
    >>> out = group_effects(rec, "site", "hedges_g", value="mass", arm="arm", arms=("t", "c"))
    >>> out[["n1", "mean1", "sd1", "n2", "mean2"]].to_dict("records")
    [{'n1': 3, 'mean1': 6.0, 'sd1': 1.0, 'n2': 3, 'mean2': 5.0}]
    """
    entry = kind_entry(kind, "group_effects", groupwise=True)
    if not isinstance(group, str):
        raise param_error("group", "group_effects", "the name of one column", group)
    options = {"correction": correction, "zero_cells": zero_cell_rule("group_effects", zero_cells),
               "exact": exact, "bias_correction": bias_correction}
    options = {k: v for k, v in options.items() if k in entry.info["options"]}
    kind_cols, added = summary_columns(entry.info["roles"])
    cols = _columns(entry.name, kind_cols, {"outcome": outcome, "x": x, "y": y, "value": value,
                                            "arm": arm})
    pair = _check_arms(entry.name, kind_cols, arms)
    out_names = [group, "n", "n_excluded", *added, name, variance_name, flags_name]
    if len(set(out_names)) < len(out_names):
        raise InputError(
            f"group_effects output columns would clash: {out_names}; rename the group column "
            "or choose other name=, variance_name=, flags_name=."
        )
    if isinstance(records, pd.DataFrame):
        keys, s = summarise_records(records, group, cols, kind_cols, pair)
    else:
        from envlink.effects.streaming import stream_summary

        keys, s = stream_summary(records, group, cols, kind_cols, pair, client=client)
    assert entry.obj is not None
    return _finish(keys, s, entry.obj, entry.info["roles"], options,
                   [group, name, variance_name, flags_name])
