"""Per-group summaries of raw records in memory: the sums every groupwise effect kind needs.

Groups are found with :func:`pandas.factorize` and every per-group sum is a
:func:`numpy.bincount`: a few passes over the records however many groups there are.
Means and SDs (and Pearson's r) take two passes, group means first, then centred
sums, so large offsets do not cost precision. :func:`envlink.effects.group_effects`
turns a summary into effect sizes; :mod:`envlink.effects.streaming` makes the same
summary from records it does not hold.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink.tables import parse_numbers, require_columns

__all__ = ["group_keys", "summarise_records", "summary_columns", "PROPORTION", "CORRELATION", "MEANS"]

#: the records' columns (roles) each kind of summary reads, and the columns it adds
PROPORTION = (("outcome",), ("events",))
CORRELATION = (("x", "y"), ("r",))
MEANS = (("value", "arm"), ("n1", "mean1", "sd1", "n2", "mean2", "sd2"))


def summary_columns(roles: tuple[str, ...]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The record columns and the added output columns of a groupwise kind with ``roles``."""
    if roles == ("events", "total"):
        return PROPORTION
    if roles == ("r", "n"):
        return CORRELATION
    return MEANS


class _Groups(NamedTuple):
    """The records' group codes and which records count."""

    codes: NDArray[np.intp]
    ok: NDArray[np.bool_]
    size: int

    def total(self, weights: NDArray[np.float64] | None = None,
              mask: NDArray[np.bool_] | None = None) -> NDArray[Any]:
        """Per-group count (or sum of ``weights``) over the records that count (and ``mask``)."""
        m = self.ok if mask is None else self.ok & mask
        every = bool(m.all())
        w = weights if weights is None or every else weights[m]
        return np.bincount(self.codes if every else self.codes[m], weights=w, minlength=self.size)


def _centred_sums(g: _Groups, a: NDArray[np.float64], b: NDArray[np.float64] | None,
                  mask: NDArray[np.bool_] | None = None) -> tuple[Any, ...]:
    """Per-group count, mean of ``a`` and the centred sums (two passes: means, then sums)."""
    n = g.total(mask=mask)
    m = g.ok if mask is None else g.ok & mask
    c = g.codes[m]
    da = a[m] - (g.total(a, mask) / n)[c]
    if b is None:
        return n, g.total(a, mask) / n, np.bincount(c, weights=da * da, minlength=g.size)
    db = b[m] - (g.total(b, mask) / n)[c]
    sums = [np.bincount(c, weights=u, minlength=g.size) for u in (da * da, db * db, da * db)]
    return (n, *sums)


def _summary_memory(g: _Groups, kind_cols: tuple[str, ...], values: list[NDArray[Any]]
                    ) -> dict[str, NDArray[Any]]:
    """The per-group summary of records in memory (see :func:`_finish` for its keys)."""
    with np.errstate(all="ignore"):
        if kind_cols == PROPORTION[0]:
            return {"events": g.total(values[0]).astype(np.int64)}
        if kind_cols == CORRELATION[0]:
            n, sxx, syy, sxy = _centred_sums(g, values[0], values[1])
            return {"r": np.clip(sxy / np.sqrt(sxx * syy), -1.0, 1.0),
                    "constant": (sxx == 0) | (syy == 0)}
        out: dict[str, NDArray[Any]] = {}
        for i in (1, 2):
            n, mean, ss = _centred_sums(g, values[0], None, values[1] == i)
            out.update({f"n{i}": n.astype(np.int64), f"mean{i}": mean,
                        f"sd{i}": np.where(n > 1, np.sqrt(ss / (n - 1)), np.nan)})
        return out


def _binary(records: pd.DataFrame, column: str, values: NDArray[np.float64]) -> NDArray[np.float64]:
    """An outcome column's numbers, with True/False written as text read as 1/0."""
    if not np.isnan(values).any():
        return values
    words = records[column].astype("string").str.strip().str.lower()
    is_true = (words == "true").fillna(False).to_numpy(dtype=bool)
    is_false = (words == "false").fillna(False).to_numpy(dtype=bool)
    return np.where(is_true, 1.0, np.where(is_false, 0.0, values))


def group_keys(records: pd.DataFrame, group: str) -> pd.Series:
    """The group column with blank text (empty or only white space) as missing.

    A blank cell, as a CSV table read as written holds, names no group: it joins the
    records with a missing group (flag ``missing_group``) rather than forming a group
    with a blank name. The Parquet engines of :mod:`envlink.effects.streaming` read it alike.

    Examples
    --------
    >>> group_keys(pd.DataFrame({"g": ["a", "", " ", "b"]}), "g").tolist()
    ['a', nan, nan, 'b']
    """
    keys = records[group]
    if keys.dtype == object or isinstance(keys.dtype, pd.StringDtype | pd.CategoricalDtype):
        blank = keys.astype(object).map(lambda v: isinstance(v, str) and not v.strip()).astype(bool)
        if blank.any():
            keys = keys.astype(object).where(~blank.to_numpy(), np.nan)
    return keys


def summarise_records(records: pd.DataFrame, group: str, cols: list[str],
                      kind_cols: tuple[str, ...], arms: tuple[Any, Any] | None
                      ) -> tuple[pd.Index, dict[str, NDArray[Any]]]:
    """Groups (in order of first appearance) and their summary: ``n``, ``n_excluded``,
    ``non_binary`` (outcomes), and ``events`` / ``r`` and ``constant`` / the arms' sizes,
    means and SDs."""
    require_columns(records, [group, *cols], what="records table")
    codes, uniques = pd.factorize(group_keys(records, group), use_na_sentinel=False)
    values: list[NDArray[Any]] = [parse_numbers(records[c])[0] for c in cols]
    non_binary = None
    if kind_cols == PROPORTION[0]:
        values[0] = _binary(records, cols[0], values[0])
        ok = np.isfinite(values[0])
        bad = ok & (values[0] != 0) & (values[0] != 1)
        ok &= ~bad
        non_binary = np.bincount(codes[bad], minlength=len(uniques))
    elif kind_cols == CORRELATION[0]:
        ok = np.isfinite(values[0]) & np.isfinite(values[1])
    else:
        assert arms is not None
        side = records[cols[1]].to_numpy()
        values[1] = np.where(side == arms[0], 1, np.where(side == arms[1], 2, 0))
        ok = np.isfinite(values[0]) & (values[1] > 0)
    g = _Groups(codes, ok, len(uniques))
    s = _summary_memory(g, kind_cols, values)
    s["n"] = g.total()
    s["n_excluded"] = (np.zeros(g.size, np.int64) if ok.all()
                       else np.bincount(codes[~ok], minlength=g.size))
    if non_binary is not None:
        s["non_binary"] = non_binary
    return pd.Index(uniques), s
