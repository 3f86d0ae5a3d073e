"""Effect sizes from counts: one proportion, and two groups with binary outcomes.

The count kinds of :data:`envlink.effects.kinds.EFFECT_KINDS`; :mod:`envlink.effects`
re-exports them.
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike, NDArray

from envlink.effects.core import (
    BackTransformWarning,
    EffectResult,
    ZeroCellRule,
    _check_correction,
    _finish,
    _flags,
    _floats,
    _missing,
)

__all__ = [
    "logit_proportion",
    "arcsine_proportion",
    "freeman_tukey",
    "freeman_tukey_inverse",
    "log_odds_ratio",
    "log_risk_ratio",
]


def _counts(events: NDArray[np.float64], total: NDArray[np.float64]):  # type: ignore[no-untyped-def]
    missing, infinite = _missing(events, total)
    with np.errstate(invalid="ignore"):
        negative = (events < 0) | (total < 0)
        zero_total = (total == 0) & ~negative
        exceed = (events > total) & ~negative
        fractional = ((events % 1 != 0) | (total % 1 != 0)) & ~missing & ~infinite
    items = [
        ("missing_input", missing),
        ("nonfinite_input", infinite),
        ("negative_count", negative),
        ("zero_total", zero_total),
        ("events_exceed_total", exceed),
        ("non_integer_count", fractional),
    ]
    return missing | infinite | negative | zero_total | exceed, items


# ---------------------------------------------------------------- proportions


def logit_proportion(
    events: ArrayLike, total: ArrayLike, *, correction: float = 0.5, zero_cells: ZeroCellRule = "zero_rows"
) -> EffectResult:
    """Logit of a proportion, ``ln(x / (n - x))``, with variance ``1/x + 1/(n - x)``.

    Parameters
    ----------
    events, total : array_like
        Counts ``x`` (events) and ``n`` (total) per row.
    correction : float, default 0.5
        Continuity correction added to both cells (``x`` and ``n - x``) of a row with
        a zero cell (``x == 0`` or ``x == n``); such rows are flagged
        ``continuity_corrected``.
    zero_cells : {"zero_rows", "all_rows", "none"}, default "zero_rows"
        Correct only rows with a zero cell; every valid row whenever any row has a
        zero cell; or none (zero-cell rows get NaN and the flag ``zero_cell``). A name
        of :data:`envlink.effects.core.ZERO_CELL_RULES`, in any spelling (``All-Rows``).

    Returns
    -------
    EffectResult

    Examples
    --------
    >>> r = logit_proportion([25, 0], [100, 10])
    >>> r.effect.round(4).tolist(), r.variance.round(4).tolist(), r.flags.tolist()
    ([-1.0986, -3.0445], [0.0533, 2.0952], ['', 'continuity_corrected'])
    """
    corrected_rows = _check_correction("logit_proportion", correction, zero_cells)
    x, n = _floats("logit_proportion", events=events, total=total)
    bad, items = _counts(x, n)
    zero = ((x == 0) | (x == n)) & ~bad
    corr = corrected_rows(zero, bad)
    x = x + correction * corr
    m = n + 2 * correction * corr - x
    uncorrected = zero & ~corr
    with np.errstate(all="ignore"):
        effect = np.log(x / m)
        variance = 1 / x + 1 / m
    items += [("continuity_corrected", corr), ("zero_cell", uncorrected)]
    return _finish(effect, variance, bad | uncorrected, items)


def arcsine_proportion(events: ArrayLike, total: ArrayLike) -> EffectResult:
    """Arcsine square-root proportion, ``asin(sqrt(x / n))``, variance ``1 / (4 n)``.

    Zero cells need no correction.

    Examples
    --------
    >>> r = arcsine_proportion([25], [100])
    >>> float(r.effect[0].round(6)), float(r.variance[0])
    (0.523599, 0.0025)
    """
    x, n = _floats("arcsine_proportion", events=events, total=total)
    bad, items = _counts(x, n)
    with np.errstate(all="ignore"):
        effect = np.arcsin(np.sqrt(x / n))
        variance = 1 / (4 * n)
    return _finish(effect, variance, bad, items)


def freeman_tukey(events: ArrayLike, total: ArrayLike) -> EffectResult:
    """Freeman–Tukey double arcsine of a proportion (Freeman & Tukey 1950), halved.

    ``y = (asin(sqrt(x / (n + 1))) + asin(sqrt((x + 1) / (n + 1)))) / 2`` with variance
    ``1 / (4 n + 2)``; the halving puts ``y`` on the scale of ``asin(sqrt(p))``.
    Zero cells need no correction.

    Notes
    -----
    Caution (Schwarzer et al. 2019, Research Synthesis Methods 10:476): a pooled
    double-arcsine value has no sample size of its own, and the usual back-transform
    (Miller 1978, :func:`freeman_tukey_inverse`) needs one; with the harmonic mean of
    the studies' sizes it can give misleading, even non-monotone, pooled proportions.
    Prefer ``logit_proportion`` for a pooled proportion; back-transform with care.

    Examples
    --------
    >>> r = freeman_tukey([0, 5], [10, 10])
    >>> r.effect.round(4).tolist(), r.variance.round(4).tolist()
    ([0.1531, 0.7854], [0.0238, 0.0238])
    """
    x, n = _floats("freeman_tukey", events=events, total=total)
    bad, items = _counts(x, n)
    with np.errstate(all="ignore"):
        effect = 0.5 * (np.arcsin(np.sqrt(x / (n + 1))) + np.arcsin(np.sqrt((x + 1) / (n + 1))))
        variance = 1 / (4 * n + 2)
    return _finish(effect, variance, bad, items)


def freeman_tukey_inverse(
    effect: ArrayLike, n: ArrayLike, *, warn: bool = True
) -> tuple[NDArray[np.float64], NDArray[np.object_]]:
    """Back-transform a (halved) Freeman–Tukey value to a proportion (Miller 1978).

    With ``t = 2 y``: ``p = (1 - sgn(cos t) sqrt(1 - (sin t + (sin t - 1/sin t) / n)^2)) / 2``.
    Values below the double arcsine of ``x = 0`` give 0, above that of ``x = n`` give 1
    (flag ``back_transform_clipped``). Every row carries the flag
    ``freeman_tukey_back_transform``, and a :class:`BackTransformWarning` repeats the
    caution of Schwarzer et al. (2019): for a pooled value, ``n`` (usually the harmonic
    mean of the study sizes) is a choice, and the result can mislead.

    Parameters
    ----------
    effect : array_like
        Halved double-arcsine values, as returned by :func:`freeman_tukey`.
    n : array_like
        Sample size to back-transform with.
    warn : bool, default True
        Issue the :class:`BackTransformWarning`.

    Returns
    -------
    proportion : ndarray of float64
    flags : ndarray of str

    Examples
    --------
    >>> p, f = freeman_tukey_inverse(freeman_tukey([3], [50]).effect, 50, warn=False)
    >>> float(p[0].round(10)), f.tolist()
    (0.06, ['freeman_tukey_back_transform'])
    """
    y, nn = _floats("freeman_tukey_inverse", effect=effect, n=n)
    if warn:
        warnings.warn(
            "Back-transforming Freeman-Tukey double arcsine values depends on the sample "
            "size chosen and can mislead for pooled estimates (Schwarzer et al. 2019); "
            "consider logit_proportion instead.",
            BackTransformWarning,
            stacklevel=2,
        )
    t = 2 * y
    with np.errstate(all="ignore"):
        low = np.arcsin(np.sqrt(1 / (nn + 1)))
        high = np.arcsin(np.sqrt(nn / (nn + 1))) + np.pi / 2
        s = np.sin(t)
        inner = np.clip(1 - (s + (s - 1 / s) / nn) ** 2, 0, None)
        p = 0.5 * (1 - np.sign(np.cos(t)) * np.sqrt(inner))
    p = np.where(t <= low, 0.0, np.where(t >= high, 1.0, p))
    bad = ~np.isfinite(y) | ~np.isfinite(nn) | (nn <= 0)
    p = np.where(bad, np.nan, p)
    clipped = ((t <= low) | (t >= high)) & ~bad
    flags = _flags(
        p.size,
        [
            ("freeman_tukey_back_transform", np.ones(p.size, dtype=bool)),
            ("back_transform_clipped", clipped),
            ("missing_input", bad),
        ],
    )
    return p, flags


# ---------------------------------------------------------------- two groups, binary


def _two_by_two(caller, events1, total1, events2, total2, correction, zero_cells):  # type: ignore[no-untyped-def]
    corrected_rows = _check_correction(caller, correction, zero_cells)
    x1, n1, x2, n2 = _floats(caller, events1=events1, total1=total1, events2=events2, total2=total2)
    bad1, items1 = _counts(x1, n1)
    bad2, items2 = _counts(x2, n2)
    bad = bad1 | bad2
    items = [(code, m1 | m2) for (code, m1), (_, m2) in zip(items1, items2, strict=True)]
    with np.errstate(invalid="ignore"):  # inf - inf: already flagged nonfinite_input
        a, b, c, d = x1, n1 - x1, x2, n2 - x2
    zero = ((a == 0) | (b == 0) | (c == 0) | (d == 0)) & ~bad
    double = (((a == 0) & (c == 0)) | ((b == 0) & (d == 0))) & ~bad
    corr = corrected_rows(zero, bad)
    k = correction * corr
    uncorrected = zero & ~corr
    items += [("continuity_corrected", corr), ("zero_cell", uncorrected), ("double_zero", double)]
    return (a + k, b + k, c + k, d + k), bad | uncorrected, items


def log_odds_ratio(
    events1: ArrayLike,
    total1: ArrayLike,
    events2: ArrayLike,
    total2: ArrayLike,
    *,
    correction: float = 0.5,
    zero_cells: ZeroCellRule = "zero_rows",
) -> EffectResult:
    """Log odds ratio of group 1 against group 2, ``ln(a d / (b c))``.

    Cells ``a = events1``, ``b = total1 - events1``, ``c = events2``,
    ``d = total2 - events2``; variance ``1/a + 1/b + 1/c + 1/d`` (Borenstein et al.
    2009, ch. 5). A row with a zero cell gets ``correction`` added to all four cells
    (flag ``continuity_corrected``; see :func:`logit_proportion` for ``zero_cells``);
    rows with no events, or only events, in both groups are also flagged
    ``double_zero``.

    Examples
    --------
    >>> r = log_odds_ratio([5], [100], [10], [100])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(4))
    (-0.7472, 0.3216)
    """
    (a, b, c, d), bad, items = _two_by_two(
        "log_odds_ratio", events1, total1, events2, total2, correction, zero_cells
    )
    with np.errstate(all="ignore"):
        effect = np.log(a * d / (b * c))
        variance = 1 / a + 1 / b + 1 / c + 1 / d
    return _finish(effect, variance, bad, items)


def log_risk_ratio(
    events1: ArrayLike,
    total1: ArrayLike,
    events2: ArrayLike,
    total2: ArrayLike,
    *,
    correction: float = 0.5,
    zero_cells: ZeroCellRule = "zero_rows",
) -> EffectResult:
    """Log risk ratio of group 1 against group 2, ``ln((a / n1) / (c / n2))``.

    Variance ``1/a - 1/n1 + 1/c - 1/n2`` (Borenstein et al. 2009, ch. 5); zero cells
    as in :func:`log_odds_ratio` (the corrected totals are ``n + 2 * correction``).

    Examples
    --------
    >>> r = log_risk_ratio([5], [100], [10], [100])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(4))
    (-0.6931, 0.28)
    """
    (a, b, c, d), bad, items = _two_by_two(
        "log_risk_ratio", events1, total1, events2, total2, correction, zero_cells
    )
    with np.errstate(all="ignore"):
        effect = np.log(a / (a + b)) - np.log(c / (c + d))
        variance = 1 / a - 1 / (a + b) + 1 / c - 1 / (c + d)
    return _finish(effect, variance, bad, items)
