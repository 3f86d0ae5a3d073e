"""Window statistics over many series at once: cumulative sums, gathers, heat stress.

Every function takes a block of series ``S`` (sources × time, float64, NaN where no
data), the grid's time steps (:class:`Steps`) and, per row, the source it reads and
its window as a :class:`Spans` (first / last overlapping step and the overlap of the
two edge steps, in days).

Weighting (DESIGN.md §4): with ``duration`` weights a step counts by the number of
days of its cell inside the window; with ``equal`` weights every overlapping step
counts once. Means, std (population form, ddof = 0) and fractions above a threshold
use these weights; ``sum`` adds each step times the fraction of its cell inside the
window (1 for every step under ``equal``); ``degree-days`` integrate
``max(v − T, 0)`` over the days of the window (whole steps under ``equal``);
``min``/``max``/``quantile`` (linear interpolation) take each overlapping step with
data once. Coverage is always the fraction of the window's days with data.

Window means, sums, fractions and degree-days come from cumulative sums over each
series (two look-ups per row); min / max / quantile / DHW maxima gather each row's
steps with one fancy index per window length.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from envlink.extract.calendars import daynum_to_ymd, times_to_daynum

__all__ = [
    "Steps",
    "Spans",
    "row_spans",
    "window_stat",
    "climatology",
    "monthly_climatology",
    "dhw_series",
    "DHW_DAYS",
    "HOTSPOT_MIN",
    "HOTSPOT_TOLERANCE",
]

#: Trailing window of degree heating weeks, days (12 weeks; Liu et al. 2014).
DHW_DAYS = 84
#: HotSpots below this (°C above the MMM) do not accumulate (Liu et al. 2014).
HOTSPOT_MIN = 1.0
#: Float round-off allowance on the HotSpot comparison, °C (float32 storage of SST
#: makes 29.3 − 28.3 come out as 0.9999992).
HOTSPOT_TOLERANCE = 1e-5


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


def _wsum(q: np.ndarray, b: np.ndarray, src: np.ndarray, sp: Spans, e0: np.ndarray, e1: np.ndarray) -> np.ndarray:
    """Σ w q over each row's window: interior steps weighted ``b``, edges ``e0``/``e1``."""
    cum = np.zeros((q.shape[0], q.shape[1] + 1), dtype=np.float64)
    np.cumsum(q * b, axis=1, out=cum[:, 1:])
    i0, i1 = sp.i0, sp.i1
    inner = np.where(i1 > i0 + 1, cum[src, i1] - cum[src, np.minimum(i0 + 1, i1)], 0.0)
    first = e0 * q[src, i0]
    last = np.where(i1 > i0, e1 * q[src, i1], 0.0)
    return np.where(sp.has, inner + first + last, 0.0)


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


def window_stat(
    S: np.ndarray,
    steps: Steps,
    src: np.ndarray,
    sp: Spans,
    kind: str,
    *,
    weights: str = "duration",
    q: float | None = None,
    threshold: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Value and coverage of one statistic for every row.

    Parameters
    ----------
    S : ndarray (sources, time)
        Series, NaN where no data.
    steps : Steps
    src : ndarray of int
        Source (row of ``S``) of each row.
    sp : Spans
        Each row's window over the steps.
    kind : str
        ``mean``, ``min``, ``max``, ``sum``, ``std``, ``quantile``, ``above``,
        ``degree-days`` (``anomaly`` and ``dhw-max`` pass prepared series as ``S``
        with kind ``mean`` / ``max``).
    weights : {"duration", "equal"}
    q, threshold : float, optional

    Returns
    -------
    value, coverage : ndarray
        ``value`` is NaN where the window holds no data.

    Examples
    --------
    >>> st = Steps(np.array([0., 31.]), np.array([31., 59.]), *(np.ones(2, int),) * 3)
    >>> S = np.array([[10.0, 20.0]])
    >>> sp = row_spans(st, np.array([0.0]), np.array([59.0]))
    >>> v, c = window_stat(S, st, np.array([0]), sp, "mean")
    >>> round(float(v[0]), 6), float(c[0])  # (31*10 + 28*20) / 59
    (14.745763, 1.0)
    """
    valid = np.isfinite(S)
    v0 = np.where(valid, S, 0.0)
    vf = valid.astype(np.float64)
    length = steps.length[None, :]
    days_with_data = _wsum(vf, length, src, sp, sp.ov0, sp.ov1)
    cov = days_with_data / np.where(sp.days > 0, sp.days, np.nan)
    if weights == "duration":
        b, e0, e1 = length, sp.ov0, sp.ov1
    else:
        b, e0, e1 = np.ones_like(length), np.ones_like(sp.ov0), np.ones_like(sp.ov1)
    with np.errstate(invalid="ignore", divide="ignore"):
        if kind in ("mean", "std", "above"):
            W = days_with_data if weights == "duration" else _wsum(vf, b, src, sp, e0, e1)
            W = np.where(W > 0, W, np.nan)
            if kind == "mean":
                val = _wsum(v0, b, src, sp, e0, e1) / W
            elif kind == "above":
                val = _wsum((v0 > float(threshold or 0.0)) & valid, b, src, sp, e0, e1) / W
            else:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    c = np.nanmean(S, axis=1, keepdims=True)
                d = np.where(valid, S - np.nan_to_num(c), 0.0)
                m1 = _wsum(d, b, src, sp, e0, e1) / W
                m2 = _wsum(d * d, b, src, sp, e0, e1) / W
                var = m2 - m1 * m1
                # Differences of cumulative sums carry round-off of about eps times
                # the running total of d² (weighted) up to the window's last step;
                # a variance below that is zero (a window with one value, or equal
                # values, has std 0 exactly, not ~1e-8 from the square root).
                dd = np.cumsum(d * d * b, axis=1)[src, sp.i1]
                floor = 64.0 * np.finfo(np.float64).eps * (dd + m2 * W) / W
                nvalid = _wsum(vf, np.ones_like(length), src, sp, np.ones_like(sp.ov0), np.ones_like(sp.ov1))
                var = np.where((var <= floor) | (nvalid <= 1), 0.0, var)
                val = np.sqrt(var)
        elif kind == "sum":
            frac0 = sp.ov0 / steps.length[sp.i0]
            frac1 = sp.ov1 / steps.length[sp.i1]
            if weights == "equal":
                frac0, frac1 = np.ones_like(frac0), np.ones_like(frac1)
            val = _wsum(v0, np.ones_like(length), src, sp, frac0, frac1)
            val = np.where(cov > 0, val, np.nan)
        elif kind == "degree-days":
            excess = np.where(valid, np.maximum(S - float(threshold or 0.0), 0.0), 0.0)
            if weights == "duration":
                val = _wsum(excess, length, src, sp, sp.ov0, sp.ov1)
            else:
                val = _wsum(excess, length, src, sp, steps.length[sp.i0], steps.length[sp.i1])
            val = np.where(cov > 0, val, np.nan)
        elif kind == "min":
            val = _gather(S, src, sp, lambda a: np.nanmin(a, axis=1))
        elif kind == "max":
            val = _gather(S, src, sp, lambda a: np.nanmax(a, axis=1))
        elif kind == "quantile":
            qq = float(q or 0.0)
            val = _gather(S, src, sp, lambda a: np.nanquantile(a, qq, axis=1))
        else:
            raise ValueError(f"unknown statistic {kind!r}")
    cov = np.where(sp.has, np.nan_to_num(cov), 0.0)
    return np.asarray(val, dtype=np.float64), cov


def climatology(S: np.ndarray, keys: np.ndarray, nkeys: int, in_base: np.ndarray) -> np.ndarray:
    """Mean of each key (calendar month or day) over the baseline steps, (sources, nkeys).

    Examples
    --------
    >>> S = np.array([[1.0, 2.0, 3.0, np.nan]])
    >>> climatology(S, np.array([0, 1, 0, 1]), 2, np.ones(4, bool)).tolist()
    [[2.0, 2.0]]
    """
    from scipy import sparse

    t = np.nonzero(in_base)[0]
    K = sparse.csr_matrix((np.ones(t.size), (t, keys[t])), shape=(S.shape[1], nkeys))
    valid = np.isfinite(S)
    num = np.asarray(K.T @ np.where(valid, S, 0.0).T).T
    cnt = np.asarray(K.T @ valid.astype(np.float64).T).T
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, num / cnt, np.nan)


def monthly_climatology(S: np.ndarray, steps: Steps, in_base: np.ndarray) -> np.ndarray:
    """Mean over the baseline years of each calendar month's mean, (sources, 12).

    Monthly means are duration-weighted over the steps of each (year, month) with data.
    """
    from scipy import sparse

    t = np.nonzero(in_base)[0]
    if t.size == 0:
        return np.full((S.shape[0], 12), np.nan)
    y0 = int(steps.year[t].min())
    ym = (steps.year[t] - y0) * 12 + steps.month[t] - 1
    nym = int(ym.max()) + 1
    w = steps.length[t]
    K = sparse.csr_matrix((w, (t, ym)), shape=(S.shape[1], nym))
    valid = np.isfinite(S)
    num = np.asarray(K.T @ np.where(valid, S, 0.0).T).T
    cnt = np.asarray(K.T @ valid.astype(np.float64).T).T
    with np.errstate(invalid="ignore", divide="ignore"):
        monthly = np.where(cnt > 0, num / cnt, np.nan)
    pad = (-nym) % 12
    monthly = np.concatenate([monthly, np.full((S.shape[0], pad), np.nan)], axis=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(monthly.reshape(S.shape[0], -1, 12), axis=1)


def dhw_series(S: np.ndarray, mmm: np.ndarray) -> np.ndarray:
    """Degree heating weeks (°C-weeks) of daily series against each source's MMM.

    HotSpot = SST − MMM; HotSpots of at least 1 °C accumulate over the trailing 84
    days (the day itself and the 83 before), divided by 7 (Liu et al. 2014; Skirving
    et al. 2020). Days without data add nothing and have no DHW value themselves.

    Examples
    --------
    >>> S = np.array([[29.0, 28.8, 30.0]])  # MMM 28: HotSpots 1.0, 0.8, 2.0
    >>> (dhw_series(S, np.array([28.0])) * 7).round(9).tolist()
    [[1.0, 1.0, 3.0]]
    """
    hs = S - np.asarray(mmm, dtype=np.float64)[:, None]
    acc = np.where(np.isfinite(hs) & (hs >= HOTSPOT_MIN - HOTSPOT_TOLERANCE), hs, 0.0)
    cum = np.zeros((S.shape[0], S.shape[1] + 1))
    np.cumsum(acc, axis=1, out=cum[:, 1:])
    t = np.arange(S.shape[1])
    dhw = (cum[:, t + 1] - cum[:, np.maximum(t + 1 - DHW_DAYS, 0)]) / 7.0
    return np.where(np.isfinite(S), dhw, np.nan)
