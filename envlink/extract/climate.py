"""Baseline climatologies and heat stress over many series at once (kernels of :mod:`envlink.extract.statistics`).

Series are sources × time, float64, NaN where no data; the time steps are
:class:`~envlink.extract.stats.Steps`. :func:`climatology` and
:func:`monthly_climatology` average the baseline's steps by calendar key;
:func:`dhw_series` gives degree heating weeks (Liu et al. 2014; Skirving et al. 2020).
"""

from __future__ import annotations

import warnings

import numpy as np

from envlink.extract.stats import Steps

__all__ = ["climatology", "monthly_climatology", "dhw_series", "DHW_DAYS", "EXCESS_MIN", "EXCESS_TOLERANCE"]

#: Trailing window of degree heating weeks, days (12 weeks; Liu et al. 2014).
DHW_DAYS = 84
#: Daily excesses over the maximum monthly mean below this (°C) do not accumulate
#: (Liu et al. 2014).
EXCESS_MIN = 1.0
#: Float round-off allowance on the comparison with EXCESS_MIN, °C (float32 storage of SST
#: makes 29.3 − 28.3 come out as 0.9999992).
EXCESS_TOLERANCE = 1e-5


def climatology(S: np.ndarray, keys: np.ndarray, nkeys: int, in_base: np.ndarray) -> np.ndarray:
    """Mean of each key (calendar month or day) over the baseline steps, (sources, nkeys).

    Examples
    --------
    >>> S = np.array([[1.0, 2.0, 3.0, np.nan]])
    >>> climatology(S, np.array([0, 1, 0, 1]), 2, np.ones(4, bool)).tolist()
    [[2.0, 2.0]]
    """
    t = np.nonzero(in_base)[0]
    if _cycles(keys, nkeys, t):  # e.g. whole years of a monthly grid: sums by reshaping
        part = S[:, t[0]:t[-1] + 1]
        valid = np.isfinite(part)
        shape = (S.shape[0], t.size // nkeys, nkeys)
        num = np.where(valid, part, 0.0).reshape(shape).sum(axis=1)  # years added in order, as below
        cnt = valid.reshape(shape).sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.roll(np.where(cnt > 0, num / cnt, np.nan), int(keys[t[0]]), axis=1)
    from scipy import sparse

    K = sparse.csr_matrix((np.ones(t.size), (t, keys[t])), shape=(S.shape[1], nkeys))
    valid = np.isfinite(S)
    num = np.asarray(K.T @ np.where(valid, S, 0.0).T).T
    cnt = np.asarray(K.T @ valid.astype(np.float64).T).T
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, num / cnt, np.nan)


def _cycles(keys: np.ndarray, nkeys: int, t: np.ndarray) -> bool:
    """Whether the steps ``t`` are consecutive and their keys run through every key whole times."""
    if t.size == 0 or t.size % nkeys or int(t[-1] - t[0]) + 1 != t.size:
        return False
    k = keys[t]
    return bool(np.array_equal(k, (int(k[0]) + np.arange(t.size)) % nkeys))


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

    Each day's excess over the maximum monthly mean, SST − MMM, accumulates when it
    is at least 1 °C, over the trailing 84 days (the day itself and the 83 before),
    divided by 7 (Liu et al. 2014; Skirving et al. 2020). Days without data add nothing and have no DHW value themselves.

    Examples
    --------
    >>> S = np.array([[29.0, 28.8, 30.0]])  # MMM 28: excesses 1.0, 0.8, 2.0
    >>> (dhw_series(S, np.array([28.0])) * 7).round(9).tolist()
    [[1.0, 1.0, 3.0]]
    """
    hs = S - np.asarray(mmm, dtype=np.float64)[:, None]
    acc = np.where(np.isfinite(hs) & (hs >= EXCESS_MIN - EXCESS_TOLERANCE), hs, 0.0)
    cum = np.zeros((S.shape[0], S.shape[1] + 1))
    np.cumsum(acc, axis=1, out=cum[:, 1:])
    t = np.arange(S.shape[1])
    dhw = (cum[:, t + 1] - cum[:, np.maximum(t + 1 - DHW_DAYS, 0)]) / 7.0
    return np.where(np.isfinite(S), dhw, np.nan)
