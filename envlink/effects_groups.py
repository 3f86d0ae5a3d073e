"""Effect sizes per group from raw records (one row per observation), vectorised.

Groups are found once with :func:`pandas.factorize` and every per-group sum is a
:func:`numpy.bincount`, so the cost is a few passes over the records however many
groups there are (10^7 groups take seconds, not hours). Re-exported by
:mod:`envlink.effects`.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink.errors import InputError, param_error
from envlink.tables import require_columns

__all__ = ["GroupKind", "group_effects"]

GroupKind = Literal["fisher_z", "logit_proportion", "arcsine_proportion", "freeman_tukey"]
_GROUP_KINDS = ("fisher_z", "logit_proportion", "arcsine_proportion", "freeman_tukey")


def _add_flag(flags: NDArray[np.object_], mask: NDArray[np.bool_], code: str) -> None:
    sel = np.flatnonzero(mask)
    if sel.size:
        cur = flags[sel]
        flags[sel] = np.where(cur == "", code, cur + ";" + code)


def group_effects(
    records: pd.DataFrame,
    group: str,
    kind: GroupKind,
    *,
    x: str | None = None,
    y: str | None = None,
    outcome: str | None = None,
    name: str = "effect",
    variance_name: str = "variance",
    flags_name: str = "effect_flags",
    correction: float = 0.5,
    zero_cells: Literal["zero_rows", "all_rows", "none"] = "zero_rows",
) -> pd.DataFrame:
    """One effect size per group of raw records.

    Parameters
    ----------
    records : pandas.DataFrame
        One row per observation.
    group : str
        Column whose values define the groups. Records with a missing group value
        form one group of their own, flagged ``missing_group``.
    kind : {"fisher_z", "logit_proportion", "arcsine_proportion", "freeman_tukey"}
        ``fisher_z``: Pearson's r between columns ``x`` and ``y`` within each group,
        then ``atanh(r)`` with variance ``1 / (n - 3)`` (groups with ``n <= 3`` are
        flagged and get NaN; so do groups where ``x`` or ``y`` is constant, flag
        ``zero_variance_in_group``). The proportion kinds: the share of 1s in the 0/1
        column ``outcome`` (True/False, also as text, work too), passed to the kind of that name in
        :mod:`envlink.effects` (``correction`` and ``zero_cells`` apply to
        ``logit_proportion``).
    x, y, outcome : str, optional
        Columns, as the kind needs.
    name, variance_name, flags_name : str
        Names of the effect, variance and flag columns.
    correction, zero_cells
        Continuity correction for ``logit_proportion`` (see
        :func:`envlink.effects.logit_proportion`).

    Returns
    -------
    pandas.DataFrame
        One row per group, in order of first appearance: the group value, ``n``
        (records used), ``n_excluded`` (records with a missing or, for an outcome,
        non-0/1 value; flag ``records_excluded``, or ``outcome_not_binary`` when a value
        was neither 0 nor 1), ``r`` or ``events``, then the effect, variance and flags.

    Examples
    --------
    >>> rec = pd.DataFrame({"reef": list("aaaaabbb"), "ill": [1, 0, 0, 1, 0, 1, 1, 0]})
    >>> out = group_effects(rec, "reef", "logit_proportion", outcome="ill")
    >>> out[["reef", "n", "events", "effect"]].round(4).to_dict("list")
    {'reef': ['a', 'b'], 'n': [5, 3], 'events': [2, 2], 'effect': [-0.4055, 0.6931]}
    """
    from envlink.effects import (
        _numeric,
        arcsine_proportion,
        fisher_z,
        freeman_tukey,
        logit_proportion,
    )

    caller = "group_effects"
    if kind not in _GROUP_KINDS:
        raise param_error("kind", caller, "one of " + ", ".join(map(repr, _GROUP_KINDS)), kind)
    if not isinstance(group, str):
        raise param_error("group", caller, "the name of one column", group)
    if kind == "fisher_z":
        if x is None or y is None or outcome is not None:
            raise InputError("group_effects(kind='fisher_z') needs x= and y= (two columns) and no outcome=.")
        value_cols = [x, y]
    else:
        if outcome is None or x is not None or y is not None:
            raise InputError(f"group_effects(kind={kind!r}) needs outcome= (a 0/1 column) and no x= or y=.")
        value_cols = [outcome]
    require_columns(records, [group, *value_cols], what="records table")
    extra = "r" if kind == "fisher_z" else "events"
    out_names = [group, "n", "n_excluded", extra, name, variance_name, flags_name]
    if len(set(out_names)) < len(out_names):
        raise InputError(
            f"group_effects output columns would clash: {out_names}; rename the group column "
            "or choose other name=, variance_name=, flags_name=."
        )

    codes, uniques = pd.factorize(records[group], use_na_sentinel=False)
    n_groups = len(uniques)
    values = [_numeric(records[c]) for c in value_cols]
    if kind != "fisher_z" and np.isnan(values[0]).any():  # True/False written as text
        words = records[outcome].astype("string").str.strip().str.lower()
        is_true = (words == "true").fillna(False).to_numpy(dtype=bool)
        is_false = (words == "false").fillna(False).to_numpy(dtype=bool)
        values[0] = np.where(is_true, 1.0, np.where(is_false, 0.0, values[0]))
    ok = np.ones(len(records), dtype=bool)
    for v in values:
        ok &= np.isfinite(v)
    non_binary = np.zeros(len(records), dtype=bool)
    if kind != "fisher_z":
        non_binary = ok & (values[0] != 0) & (values[0] != 1)
        ok &= ~non_binary
    all_ok = bool(ok.all())

    def used(a: NDArray[np.generic]) -> NDArray[np.generic]:  # no copy when every record counts
        return a if all_ok else a[ok]

    c_ok = used(codes)
    n = np.bincount(c_ok, minlength=n_groups)
    n_excluded = np.zeros(n_groups, np.int64) if all_ok else np.bincount(codes[~ok], minlength=n_groups)
    with np.errstate(all="ignore"):
        if kind == "fisher_z":
            xo, yo = used(values[0]), used(values[1])
            mx = np.bincount(c_ok, weights=xo, minlength=n_groups) / n
            my = np.bincount(c_ok, weights=yo, minlength=n_groups) / n
            dx = xo - mx[c_ok]
            dy = yo - my[c_ok]
            del xo, yo
            sxx = np.bincount(c_ok, weights=dx * dx, minlength=n_groups)
            syy = np.bincount(c_ok, weights=dy * dy, minlength=n_groups)
            sxy = np.bincount(c_ok, weights=dx * dy, minlength=n_groups)
            del dx, dy
            constant = ((sxx == 0) | (syy == 0)) & (n > 3)
            stat = np.clip(sxy / np.sqrt(sxx * syy), -1.0, 1.0)
            res = fisher_z(np.where(constant | (n <= 3), 0.0, stat), n)  # small n: flag only
            stat = np.where(constant | (n < 2), np.nan, stat)
            effect = np.where(constant, np.nan, res.effect)
            variance = np.where(constant, np.nan, res.variance)
            flags = res.flags
            _add_flag(flags, constant, "zero_variance_in_group")
        else:
            stat = np.bincount(c_ok, weights=used(values[0]), minlength=n_groups).astype(np.int64)
            if kind == "logit_proportion":
                res = logit_proportion(stat, n, correction=correction, zero_cells=zero_cells)
            elif kind == "arcsine_proportion":
                res = arcsine_proportion(stat, n)
            else:
                res = freeman_tukey(stat, n)
            effect, variance, flags = res.effect, res.variance, res.flags
    _add_flag(flags, n_excluded > 0, "records_excluded")
    if non_binary.any():
        _add_flag(flags, np.bincount(codes[non_binary], minlength=n_groups) > 0, "outcome_not_binary")
    group_values = pd.Index(uniques)
    _add_flag(flags, np.asarray(group_values.isna()), "missing_group")
    return pd.DataFrame(
        {
            group: group_values,
            "n": n,
            "n_excluded": n_excluded,
            extra: stat,
            name: effect,
            variance_name: variance,
            flags_name: pd.Series(flags, dtype=object).astype(str),
        }
    )
