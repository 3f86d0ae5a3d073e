"""Window kernels over many series at once: cumulative sums, gathers, heat stress.

The pure array work behind the statistics of :mod:`envlink.extract.statistics`.
Every kernel reads a block of series ``S`` (sources × time, float64, NaN where no
data), the grid's time steps (:class:`Steps`) and, per row, the source it reads and
its window as a :class:`Spans` (first / last overlapping step and the overlap of the
two edge steps, in days), gathered in a :class:`WindowData`.

Weighting (docs/extract.md, "Time weights"): with ``duration`` weights a step counts by the number of
days of its cell inside the window; with ``equal`` weights every overlapping step
counts once. Means, std (population form, ddof = 0) and fractions above a threshold
use these weights; ``sum`` adds each step times the fraction of its cell inside the
window (1 for every step under ``equal``); ``degree-days`` integrate
``max(v − T, 0)`` over the days of the window (whole steps under ``equal``);
``min``/``max``/``quantile`` (linear interpolation) take each overlapping step with
data once. Coverage is always the fraction of the window's days with data.

Window means, sums, fractions and degree-days come from cumulative sums over each
series (two look-ups per row), or, where the windows are short against the series (a
few months of a 30-year monthly series), from each window's own steps gathered and
added (work in proportion to the windows, not the series); min / max / quantile / DHW
maxima gather each row's steps with one fancy index per window length. Baseline
climatologies and heat stress: :mod:`envlink.extract.climate`.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from envlink.extract.calendars import daynum_to_ymd, times_to_daynum

__all__ = [
    "Steps",
    "Spans",
    "row_spans",
    "within_span",
    "WindowData",
    "window_data",
    "window_stat",
    "window_mean",
    "window_above",
    "window_std",
    "window_sum",
    "window_degree_days",
    "window_min",
    "window_max",
    "window_quantile",
]

@dataclass
class Steps:
    """Time steps of a grid as day numbers: cell ``[t0, t1)`` and start year/month/day."""

    t0: np.ndarray
    t1: np.ndarray
    year: np.ndarray
    month: np.ndarray
    day: np.ndarray

    @property
    def length(self) -> np.ndarray:
        """Length of each step's cell in days."""
        return self.t1 - self.t0

    @property
    def monthly(self) -> bool:
        """True for monthly (or longer) steps."""
        return bool(np.median(self.length) >= 27.0)

    @classmethod
    def from_grid(cls, grid, calendar: str) -> Steps:  # noqa: ANN001
        """Steps of a normalised grid (``time_start`` / ``time_end`` coordinates)."""
        t = grid["time"].values
        t0 = times_to_daynum(grid["time_start"].values if "time_start" in grid.coords else t, calendar)
        if "time_end" in grid.coords:
            t1 = times_to_daynum(grid["time_end"].values, calendar)
        else:
            d = np.diff(t0)
            t1 = t0 + np.append(d, d[-1] if d.size else 1.0)
        y, m, dd = daynum_to_ymd(t0 + 1e-6, calendar)
        return cls(t0, t1, y, m, dd)


@dataclass
class Spans:
    """Per-row window spans over the steps."""

    i0: np.ndarray
    i1: np.ndarray
    ov0: np.ndarray
    ov1: np.ndarray
    days: np.ndarray
    has: np.ndarray


def row_spans(steps: Steps, ws: np.ndarray, we: np.ndarray) -> Spans:
    """First / last step overlapping each window ``[ws, we)`` and the edge overlaps.

    Examples
    --------
    >>> st = Steps(np.array([0., 31.]), np.array([31., 59.]), *(np.ones(2, int),) * 3)
    >>> sp = row_spans(st, np.array([10.0]), np.array([40.0]))
    >>> sp.i0.tolist(), sp.i1.tolist(), sp.ov0.tolist(), sp.ov1.tolist()
    ([0], [1], [21.0], [9.0])
    """
    n = steps.t0.size
    i0 = np.searchsorted(steps.t1, ws, side="right")
    i1 = np.searchsorted(steps.t0, we, side="left") - 1
    has = (i1 >= i0) & (i0 < n) & (i1 >= 0)
    a, b = np.clip(i0, 0, n - 1), np.clip(i1, 0, n - 1)
    ov0 = np.minimum(steps.t1[a], we) - np.maximum(steps.t0[a], ws)
    ov1 = np.minimum(steps.t1[b], we) - np.maximum(steps.t0[b], ws)
    return Spans(a, np.where(has, b, a), np.where(has, ov0, 0.0), np.where(has, ov1, 0.0), we - ws, has)


def within_span(steps: Steps, ws: np.ndarray, we: np.ndarray) -> np.ndarray:
    """Whether each window ``[ws, we)`` overlaps the grid's time span (first step's start
    to last step's end), gaps between steps included.

    Examples
    --------
    >>> st = Steps(np.array([0., 2.]), np.array([1., 3.]), *(np.ones(2, int),) * 3)
    >>> within_span(st, np.array([1.0, 3.0, -1.0]), np.array([2.0, 4.0, 0.0])).tolist()
    [True, False, False]
    """
    if steps.t0.size == 0:
        return np.zeros(np.shape(ws), dtype=bool)
    return (np.asarray(we) > np.min(steps.t0)) & (np.asarray(ws) < np.max(steps.t1))


def _short_windows(q: np.ndarray, sp: Spans) -> bool:
    """Whether the rows' windows hold few steps against the series' length: then each
    window's steps are gathered and added (work ∝ the windows), else cumulative sums over
    whole series answer every window with two look-ups (work ∝ the series)."""
    steps = int(np.sum(np.where(sp.has, sp.i1 - sp.i0 + 1, 0)))
    return 4 * steps < q.shape[0] * q.shape[1]


def _wsum(q: np.ndarray, b: np.ndarray, src: np.ndarray, sp: Spans, e0: np.ndarray, e1: np.ndarray) -> np.ndarray:
    """Σ w q over each row's window: interior steps weighted ``b``, edges ``e0``/``e1``.

    Examples
    --------
    >>> st = Steps(np.array([0., 31., 59.]), np.array([31., 59., 90.]), *(np.ones(3, int),) * 3)
    >>> sp = row_spans(st, np.array([10.0]), np.array([70.0]))  # 21 + 28 + 11 days
    >>> _wsum(np.array([[1.0, 2.0, 3.0]]), st.length[None, :], np.array([0]), sp, sp.ov0, sp.ov1).tolist()
    [110.0]
    """
    i0, i1 = sp.i0, sp.i1
    first = e0 * q[src, i0]
    last = np.where(i1 > i0, e1 * q[src, i1], 0.0)
    if _short_windows(q, sp):
        inner = _inner_gathered(q, b, src, sp)
    else:
        cum = np.zeros((q.shape[0], q.shape[1] + 1), dtype=np.float64)
        np.cumsum(q * b, axis=1, out=cum[:, 1:])
        inner = np.where(i1 > i0 + 1, cum[src, i1] - cum[src, np.minimum(i0 + 1, i1)], 0.0)
    return np.where(sp.has, inner + first + last, 0.0)


def _inner_gathered(q: np.ndarray, b: np.ndarray, src: np.ndarray, sp: Spans,
                    f: Callable[[np.ndarray], np.ndarray] | None = None) -> np.ndarray:
    """Σ b q over the steps strictly inside each row's window, gathered in one flat pass
    (in chunks of rows of at most 4 million steps); ``f`` is applied to the gathered values
    of ``q`` first.

    Examples
    --------
    >>> st = Steps(np.arange(4.0), np.arange(1.0, 5.0), *(np.ones(4, int),) * 3)
    >>> sp = row_spans(st, np.array([0.0, 1.0]), np.array([4.0, 2.0]))
    >>> _inner_gathered(np.array([[1.0, 2.0, 3.0, 4.0]]), st.length[None, :], np.array([0, 0]), sp).tolist()
    [5.0, 0.0]
    """
    out = np.zeros(src.size)
    count = np.where(sp.has, sp.i1 - sp.i0 - 1, 0)
    rows = np.nonzero(count > 0)[0]
    total = np.cumsum(count[rows])
    k = 0
    while k < rows.size:
        end = int(np.searchsorted(total, (total[k - 1] if k else 0) + 4_000_000, side="right"))
        r = rows[k : max(end, k + 1)]
        n = count[r]
        t = _ranges(sp.i0[r] + 1, n)
        s_rep = np.repeat(src[r], n)
        vals = q[s_rep, t]
        weights = b[0, t] if b.shape[0] == 1 else b[s_rep, t]
        prod = (vals if f is None else f(vals)) * weights
        starts = np.concatenate([[0], np.cumsum(n)[:-1]])
        out[r] = np.add.reduceat(prod, starts)
        k = max(end, k + 1)
    return out


def _ranges(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(s, s + c)`` for each (start, count), without a Python loop.

    Examples
    --------
    >>> _ranges(np.array([5, 0, 9]), np.array([2, 0, 3])).tolist()
    [5, 6, 9, 10, 11]
    """
    counts = np.asarray(counts, dtype=np.int64)
    total = int(counts.sum())
    if total == 0:
        return np.array([], dtype=np.int64)
    first = np.cumsum(counts) - counts  # position of each range's first element
    return np.repeat(np.asarray(starts, dtype=np.int64) - first, counts) + np.arange(total, dtype=np.int64)


def _gather(S: np.ndarray, src: np.ndarray, sp: Spans, func: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """Apply ``func`` along axis 1 to each row's overlapping steps (grouped by length)."""
    out = np.full(src.size, np.nan)
    n = np.where(sp.has, sp.i1 - sp.i0 + 1, 0)
    for length in np.unique(n[n > 0]):
        rows = np.nonzero(n == length)[0]
        per = max(1, 4_000_000 // int(length))
        for k in range(0, rows.size, per):
            r = rows[k : k + per]
            idx = sp.i0[r, None] + np.arange(length)[None, :]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                out[r] = func(S[src[r, None], idx])
    return out


@dataclass
class WindowData:
    """A block of series and each row's window, with the weighting terms every kernel shares.

    Built by :func:`window_data`; the kernels below (``window_mean`` ...) read it.
    """

    S: np.ndarray
    steps: Steps
    src: np.ndarray
    sp: Spans
    weights: str
    b: np.ndarray
    e0: np.ndarray
    e1: np.ndarray

    @cached_property
    def valid(self) -> np.ndarray:
        """Steps with data (the whole block)."""
        return np.isfinite(self.S)

    @cached_property
    def v0(self) -> np.ndarray:
        """The values, 0 where no data (the whole block)."""
        return np.where(self.valid, self.S, 0.0)

    @cached_property
    def vf(self) -> np.ndarray:
        """1.0 where data, else 0.0 (the whole block)."""
        return self.valid.astype(np.float64)

    @cached_property
    def days_with_data(self) -> np.ndarray:
        """Days of each row's window with data."""
        length = self.steps.length[None, :]
        return _wsum_of(self.S, _has_data, length, self.src, self.sp, self.sp.ov0, self.sp.ov1)

    @cached_property
    def cov(self) -> np.ndarray:
        """Fraction of each row's window days with data."""
        return self.days_with_data / np.where(self.sp.days > 0, self.sp.days, np.nan)

    def wsum(self, q: np.ndarray) -> np.ndarray:
        """Σ w q over each row's window, with this block's time weights."""
        return _wsum(q, self.b, self.src, self.sp, self.e0, self.e1)

    def wsum_of(self, f: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
        """Σ w f(v) over each row's window (``f`` of the values, NaN where no data), computed
        only on the windows' steps where they are short."""
        return _wsum_of(self.S, f, self.b, self.src, self.sp, self.e0, self.e1)

    def weight_total(self) -> np.ndarray:
        """Σ w over the steps with data (NaN where none)."""
        W = self.days_with_data if self.weights == "duration" else self.wsum_of(_has_data)
        return np.where(W > 0, W, np.nan)


def _has_data(v: np.ndarray) -> np.ndarray:
    return np.isfinite(v).astype(np.float64)


def _value_or_zero(v: np.ndarray) -> np.ndarray:
    return np.where(np.isfinite(v), v, 0.0)


def _wsum_of(S: np.ndarray, f: Callable[[np.ndarray], np.ndarray], b: np.ndarray, src: np.ndarray, sp: Spans,
             e0: np.ndarray, e1: np.ndarray) -> np.ndarray:
    """:func:`_wsum` of ``f(S)``, with ``f`` applied only to the gathered steps of short windows."""
    if not _short_windows(S, sp):
        return _wsum(f(S), b, src, sp, e0, e1)
    i0, i1 = sp.i0, sp.i1
    first = e0 * f(S[src, i0])
    last = np.where(i1 > i0, e1 * f(S[src, i1]), 0.0)
    inner = _inner_gathered(S, b, src, sp, f)
    return np.where(sp.has, inner + first + last, 0.0)


def window_data(S: np.ndarray, steps: Steps, src: np.ndarray, sp: Spans, weights: str = "duration") -> WindowData:
    """The shared terms of the window kernels for series ``S`` (see the module; each is
    computed when a kernel first asks for it)."""
    length = steps.length[None, :]
    if weights == "duration":
        b, e0, e1 = length, sp.ov0, sp.ov1
    else:
        b, e0, e1 = np.ones_like(length), np.ones_like(sp.ov0), np.ones_like(sp.ov1)
    return WindowData(S, steps, src, sp, weights, b, e0, e1)


def window_mean(w: WindowData, arg: object = None) -> np.ndarray:
    """Weighted mean over the steps with data."""
    return w.wsum_of(_value_or_zero) / w.weight_total()


def window_above(w: WindowData, threshold: object) -> np.ndarray:
    """Weighted fraction of the time with data above ``threshold``."""
    t = float(threshold or 0.0)  # type: ignore[arg-type]
    return w.wsum_of(lambda v: ((v > t) & np.isfinite(v)).astype(np.float64)) / w.weight_total()


def window_std(w: WindowData, arg: object = None) -> np.ndarray:
    """Weighted population standard deviation (ddof = 0)."""
    S, src, sp, b = w.S, w.src, w.sp, w.b
    W = w.weight_total()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        c = np.nanmean(S, axis=1, keepdims=True)
    d = np.where(w.valid, S - np.nan_to_num(c), 0.0)
    m1 = w.wsum(d) / W
    m2 = w.wsum(d * d) / W
    var = m2 - m1 * m1
    # Differences of cumulative sums carry round-off of about eps times the running
    # total of d² (weighted) up to the window's last step (sums gathered over the
    # window itself, about eps times its own total); a variance below that is zero (a
    # window with one value, or equal values, has std 0 exactly, not ~1e-8 from the
    # square root).
    dd = m2 * W if _short_windows(d, sp) else np.cumsum(d * d * b, axis=1)[src, sp.i1]
    floor = 64.0 * np.finfo(np.float64).eps * (dd + m2 * W) / W
    ones = np.ones_like(w.steps.length[None, :])
    nvalid = _wsum_of(S, _has_data, ones, src, sp, np.ones_like(sp.ov0), np.ones_like(sp.ov1))
    var = np.where((var <= floor) | (nvalid <= 1), 0.0, var)
    return np.sqrt(var)


def window_sum(w: WindowData, arg: object = None) -> np.ndarray:
    """Σ f·v, f the fraction of each step's cell inside the window (1 under ``equal``)."""
    sp, steps = w.sp, w.steps
    frac0 = sp.ov0 / steps.length[sp.i0]
    frac1 = sp.ov1 / steps.length[sp.i1]
    if w.weights == "equal":
        frac0, frac1 = np.ones_like(frac0), np.ones_like(frac1)
    val = _wsum_of(w.S, _value_or_zero, np.ones_like(steps.length[None, :]), w.src, sp, frac0, frac1)
    return np.where(w.cov > 0, val, np.nan)


def window_degree_days(w: WindowData, threshold: object) -> np.ndarray:
    """Σ days·max(v − T, 0) over the window's days (whole steps under ``equal``)."""
    sp, steps = w.sp, w.steps
    t = float(threshold or 0.0)  # type: ignore[arg-type]

    def excess(v: np.ndarray) -> np.ndarray:
        return np.where(np.isfinite(v), np.maximum(v - t, 0.0), 0.0)

    length = steps.length[None, :]
    if w.weights == "duration":
        val = _wsum_of(w.S, excess, length, w.src, sp, sp.ov0, sp.ov1)
    else:
        val = _wsum_of(w.S, excess, length, w.src, sp, steps.length[sp.i0], steps.length[sp.i1])
    return np.where(w.cov > 0, val, np.nan)


def window_min(w: WindowData, arg: object = None) -> np.ndarray:
    """Least value over the overlapping steps with data."""
    return _gather(w.S, w.src, w.sp, lambda a: np.nanmin(a, axis=1))


def window_max(w: WindowData, arg: object = None) -> np.ndarray:
    """Greatest value over the overlapping steps with data."""
    return _gather(w.S, w.src, w.sp, lambda a: np.nanmax(a, axis=1))


def window_quantile(w: WindowData, q: object) -> np.ndarray:
    """Linear-interpolation quantile ``q`` of the overlapping steps with data (unweighted)."""
    qq = float(q or 0.0)  # type: ignore[arg-type]
    return _gather(w.S, w.src, w.sp, lambda a: np.nanquantile(a, qq, axis=1))


#: A window kernel: (window data, argument) -> one value per row.
Kernel = Callable[[WindowData, object], np.ndarray]


def window_stat(
    S: np.ndarray,
    steps: Steps,
    src: np.ndarray,
    sp: Spans,
    kernel: Kernel,
    arg: object = None,
    *,
    weights: str = "duration",
) -> tuple[np.ndarray, np.ndarray]:
    """Value and coverage of one window kernel for every row.

    Parameters
    ----------
    S : ndarray (sources, time)
        Series, NaN where no data.
    steps : Steps
    src : ndarray of int
        Source (row of ``S``) of each row.
    sp : Spans
        Each row's window over the steps.
    kernel : callable
        One of the kernels of this module (``window_mean``, ``window_quantile`` ...);
        the statistics of :mod:`envlink.extract.statistics` name theirs.
    arg : object, optional
        The kernel's argument (a quantile, a threshold).
    weights : {"duration", "equal"}

    Returns
    -------
    value, coverage : ndarray
        ``value`` is NaN where the window holds no data.

    Examples
    --------
    >>> st = Steps(np.array([0., 31.]), np.array([31., 59.]), *(np.ones(2, int),) * 3)
    >>> S = np.array([[10.0, 20.0]])
    >>> sp = row_spans(st, np.array([0.0]), np.array([59.0]))
    >>> v, c = window_stat(S, st, np.array([0]), sp, window_mean)
    >>> round(float(v[0]), 6), float(c[0])  # (31*10 + 28*20) / 59
    (14.745763, 1.0)
    """
    w = window_data(S, steps, src, sp, weights)
    with np.errstate(invalid="ignore", divide="ignore"):
        val = kernel(w, arg)
    cov = np.where(sp.has, np.nan_to_num(w.cov), 0.0)
    return np.asarray(val, dtype=np.float64), cov
