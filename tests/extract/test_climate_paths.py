"""Baseline climatology: the reshaped path for whole cycles equals the general sparse path bit for bit.

Reference: the mean of each calendar key's baseline values computed one key at a time
with ``numpy.nanmean`` (the definition in docs/extract.md, the statistics table, `anomaly`), and the
general path of :func:`envlink.extract.climate.climatology` on the same numbers.
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.testing import assert_allclose, assert_array_equal

from envlink.extract import climate


def _series(n: int = 300, nt: int = 372, seed: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    S = rng.normal(20.0, 3.0, (n, nt)).astype(np.float32).astype(np.float64)
    S[rng.random(S.shape) < 0.07] = np.nan
    S[0] = np.nan  # a cell without data
    S[1, ::12] = np.nan  # a cell without any January
    return S


def _by_key(S: np.ndarray, keys: np.ndarray, nkeys: int, base: np.ndarray) -> np.ndarray:
    out = np.full((S.shape[0], nkeys), np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN keys
        for k in range(nkeys):
            cols = np.nonzero(base & (keys == k))[0]
            if cols.size:
                out[:, k] = np.nanmean(S[:, cols], axis=1)
    return out


def test_whole_years_of_months_equal_the_sparse_path_and_the_key_by_key_mean(monkeypatch) -> None:
    S = _series()
    keys = np.arange(S.shape[1]) % 12
    for start, stop in ((0, 360), (6, 366), (13, 373 - 12)):  # starting in January, July, February
        base = np.zeros(S.shape[1], bool)
        base[start:stop] = True
        assert climate._cycles(keys, 12, np.nonzero(base)[0])
        fast = climate.climatology(S, keys, 12, base)
        monkeypatch.setattr(climate, "_cycles", lambda *a: False)
        general = climate.climatology(S, keys, 12, base)
        monkeypatch.undo()
        assert_array_equal(fast, general)  # same additions in the same order
        assert_allclose(fast, _by_key(S, keys, 12, base), rtol=1e-13, atol=0)


def test_irregular_baselines_take_the_general_path() -> None:
    S = _series(nt=40)
    keys = np.arange(40) % 12
    gap = np.ones(40, bool)
    gap[5] = False  # a missing step: not consecutive
    part = np.zeros(40, bool)
    part[0:30] = True  # 2.5 cycles
    for base in (gap, part):
        assert not climate._cycles(keys, 12, np.nonzero(base)[0])
        assert_allclose(climate.climatology(S, keys, 12, base), _by_key(S, keys, 12, base),
                        rtol=1e-13, atol=0)
