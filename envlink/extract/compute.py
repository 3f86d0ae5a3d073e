"""Computing per-row values from cell series: source blocks and their series.

:func:`compute_values` walks the sources of an :class:`~envlink.extract.plan.ExtractionPlan`
in blocks (so memory stays bounded however many rows there are), builds each
block's source series from the cell series, and lets the plan's statistic compute
every row of the block at once (and its spatial rule add QA codes).
:func:`coverage` gives the fraction of each row's window with data.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING

import numpy as np

from envlink.core.flags import RowFlags
from envlink.extract.plan import Block, ExtractionPlan
from envlink.extract.stats import Spans, Steps, _ranges

if TYPE_CHECKING:
    from envlink.extract.sources import Sources

__all__ = ["compute_values", "coverage", "sources_without_data"]

_BLOCK_ELEMENTS = 2_000_000


def _sub(sp: Spans, r: np.ndarray) -> Spans:
    return Spans(sp.i0[r], sp.i1[r], sp.ov0[r], sp.ov1[r], sp.days[r], sp.has[r])


def _blocks(row_src: np.ndarray, nsrc: int, nt: int) -> Iterator[tuple[int, int, np.ndarray]]:
    """Yield (first source, end source, rows) for blocks of sources."""
    per = max(1, _BLOCK_ELEMENTS // max(nt, 1))
    rows = np.nonzero(row_src >= 0)[0]
    order = rows[np.argsort(row_src[rows], kind="stable")]
    srcs = row_src[order]
    for a in range(0, nsrc, per):
        b = min(a + per, nsrc)
        lo, hi = np.searchsorted(srcs, a, "left"), np.searchsorted(srcs, b, "left")
        if hi > lo:
            yield a, b, order[lo:hi]


def coverage(X: np.ndarray, steps: Steps, row_x: np.ndarray, sp: Spans) -> np.ndarray:
    """Fraction of each row's window days with data in cell series ``X[row_x]`` (0 where
    ``row_x`` is -1)."""
    from envlink.extract.stats import _inner_gathered

    out = np.zeros(row_x.size)
    length = np.asarray(steps.length, dtype=np.float64)
    ok = sp.has & (row_x >= 0)
    span = int(np.sum(np.where(ok, sp.i1 - sp.i0 + 1, 0)))
    if 4 * span < np.unique(row_x[ok]).size * X.shape[1]:  # the windows' own steps: work ∝ the windows
        r = np.nonzero(ok)[0]
        s, x = _sub(sp, r), row_x[r]
        inner = _inner_gathered(X, length[None, :], x, s, np.isfinite)
        first = s.ov0 * np.isfinite(X[x, s.i0])
        last = np.where(s.i1 > s.i0, s.ov1 * np.isfinite(X[x, s.i1]), 0.0)
        out[r] = (inner + first + last) / s.days
        return np.where(sp.has, out, 0.0)
    for a, b, rows in _blocks(row_x, X.shape[0], X.shape[1]):
        valid = np.isfinite(X[a:b])
        s = _sub(sp, rows)
        src = row_x[rows] - a
        i0, i1 = s.i0, s.i1
        # days with data: the cumulative sum of (valid x step length), as _wsum does with
        # q = valid, b = length, but with one float64 temporary instead of three
        cum = np.zeros((b - a, X.shape[1] + 1), dtype=np.float64)
        np.cumsum(np.where(valid, length[None, :], 0.0), axis=1, out=cum[:, 1:])
        inner = np.where(i1 > i0 + 1, cum[src, i1] - cum[src, np.minimum(i0 + 1, i1)], 0.0)
        first = s.ov0 * valid[src, i0]
        last = np.where(i1 > i0, s.ov1 * valid[src, i1], 0.0)
        out[rows] = np.where(s.has, inner + first + last, 0.0) / s.days
    return np.where(sp.has, out, 0.0)


def _source_series(X: np.ndarray, xrow: np.ndarray, srcs: Sources, a: int, b: int) -> np.ndarray:
    p0, p1 = srcs.ptr[a], srcs.ptr[b]
    if srcs.single:
        return X[xrow[p0:p1]].astype(np.float64)
    from scipy import sparse

    used, local = np.unique(xrow[p0:p1], return_inverse=True)
    counts = np.diff(srcs.ptr[a : b + 1])
    rows = np.repeat(np.arange(b - a), counts)
    W = sparse.csr_matrix((srcs.weights[p0:p1], (rows, local.ravel())), shape=(b - a, used.size))
    Xs = X[used].astype(np.float64)
    valid = np.isfinite(Xs)
    num = W @ np.where(valid, Xs, 0.0)
    den = W @ valid.astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def compute_values(plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray) -> tuple[np.ndarray, np.ndarray, RowFlags]:
    """Value and coverage of every row (NaN / 0 where it has no source) and extra QA codes.

    Parameters
    ----------
    plan : ExtractionPlan
        The request, with its sources chosen.
    X : ndarray (cells, time)
        The series of the cells read.
    xrow : ndarray of int
        For each cell of ``plan.sources.cells``, its row in ``X``.
    """
    srcs = plan.src
    n = srcs.row_src.size
    value, cov = np.full(n, np.nan), np.zeros(n)
    extra = RowFlags(n)
    statistic, rule = plan.statistic, plan.rule
    for a, b, rows in _blocks(srcs.row_src, srcs.ptr.size - 1, X.shape[1]):
        S = _source_series(X, xrow, srcs, a, b)
        blk = Block(a, b, rows, srcs.row_src[rows] - a, _sub(plan.spans, rows), extra)
        v, c = statistic.compute(S, plan, blk, plan.stat.value)
        value[rows], cov[rows] = v, c
        rule.check_block(plan, X, xrow, blk, c)
    return value, cov, extra


def sources_without_data(plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Which of ``rows`` (a boolean mask over the table) read only cells with no value at any time step.

    Such a cell is land (or masked) in the grid, not a gap of the row's window.
    """
    out = np.zeros(rows.shape, dtype=bool)
    srcs = plan.src
    which = np.nonzero(rows & (srcs.row_src >= 0))[0]
    if which.size == 0:
        return out
    src = srcs.row_src[which]
    counts = srcs.ptr[src + 1] - srcs.ptr[src]
    entries = _ranges(srcs.ptr[src], counts)
    used, local = np.unique(xrow[entries], return_inverse=True)
    has_data = np.isfinite(X[used]).any(axis=1)[local.ravel()]
    # a row has data when any of its cells does
    per_row = np.bincount(np.repeat(np.arange(which.size), counts), weights=has_data, minlength=which.size)
    out[which] = per_row == 0
    return out

