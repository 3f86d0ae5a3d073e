"""Effect sizes and their sampling variances, from summary data, row by row.

Every kind is a pure NumPy function over arrays that returns an :class:`EffectResult`
(``effect``, ``variance``, ``flags``). Rows that cannot give a value (events above the
total, a negative SD, n < 2, a mean <= 0 for a ratio of means, ``|r| > 1``, missing
numbers) get ``NaN`` and a flag explaining why; no row raises. :func:`effect_sizes`
applies a kind to the columns of a table; :func:`group_effects` (defined in
:mod:`envlink.effects_groups`) computes effects per group from raw records.

Flags are short codes joined by ``;`` (``""`` when a row has none). The formulas and
their citations are in ``docs/methods.md``.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from typing import Literal, NamedTuple

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy.special import gammaln

from envlink.errors import EnvlinkWarning, InputError, param_error
from envlink.tables import parse_numbers, require_columns

__all__ = [
    "EffectKind",
    "ZeroCellRule",
    "EffectResult",
    "BackTransformWarning",
    "KINDS",
    "logit_proportion",
    "arcsine_proportion",
    "freeman_tukey",
    "freeman_tukey_inverse",
    "log_odds_ratio",
    "log_risk_ratio",
    "hedges_g",
    "hedges_j",
    "log_response_ratio",
    "fisher_z",
    "ln_vr",
    "ln_cvr",
    "effect_sizes",
    "group_effects",
]

EffectKind = Literal[
    "logit_proportion", "arcsine_proportion", "freeman_tukey", "log_odds_ratio",
    "log_risk_ratio", "hedges_g", "log_response_ratio", "fisher_z", "ln_vr", "ln_cvr",
]  # fmt: skip
#: where a continuity correction goes: rows with a zero cell, every row when any row
#: has one, or nowhere (zero-cell rows then get no value)
ZeroCellRule = Literal["zero_rows", "all_rows", "none"]
_ZERO_RULES = ("zero_rows", "all_rows", "none")


class EffectResult(NamedTuple):
    """Effect sizes of one kind: three float64 / str arrays of the input's length."""

    effect: NDArray[np.float64]
    variance: NDArray[np.float64]
    flags: NDArray[np.object_]


class BackTransformWarning(EnvlinkWarning):
    """A back-transformation whose result needs care (see its docstring)."""


# ---------------------------------------------------------------- helpers


def _floats(caller: str, **arrays: ArrayLike) -> tuple[NDArray[np.float64], ...]:
    try:
        out = [np.asarray(a, dtype=np.float64) for a in arrays.values()]
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"{caller} needs numbers for {', '.join(arrays)}; {exc}. "
            "Tables go through envlink.effect_sizes, which flags unparseable cells."
        ) from exc
    return tuple(np.atleast_1d(a) for a in np.broadcast_arrays(*out))


def _flags(n: int, items: list[tuple[str, NDArray[np.bool_]]]) -> NDArray[np.object_]:
    out = np.full(n, "", dtype=object)
    for code, mask in items:
        sel = np.flatnonzero(mask)
        if sel.size:
            cur = out[sel]
            out[sel] = np.where(cur == "", code, cur + ";" + code)
    return out


def _missing(*arrays: NDArray[np.float64]) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    missing = np.zeros(arrays[0].shape, dtype=bool)
    infinite = np.zeros(arrays[0].shape, dtype=bool)
    for a in arrays:
        missing |= np.isnan(a)
        infinite |= np.isinf(a)
    return missing, infinite


def _finish(
    effect: NDArray[np.float64],
    variance: NDArray[np.float64],
    bad: NDArray[np.bool_],
    items: list[tuple[str, NDArray[np.bool_]]],
) -> EffectResult:
    overflow = ~bad & ~(np.isfinite(effect) & np.isfinite(variance))
    items = [*items, ("nonfinite_result", overflow)]  # e.g. numbers too large for float64
    bad = bad | overflow
    effect = np.where(bad, np.nan, effect)
    variance = np.where(bad, np.nan, variance)
    return EffectResult(effect, variance, _flags(effect.size, items))


def _check_correction(caller: str, correction: float, zero_cells: str) -> None:
    if zero_cells not in _ZERO_RULES:
        raise param_error("zero_cells", caller, "one of " + ", ".join(map(repr, _ZERO_RULES)), zero_cells)
    ok = isinstance(correction, int | float | np.floating) and not isinstance(correction, bool)
    if not (ok and np.isfinite(correction) and correction > 0):
        raise param_error("correction", caller, "a positive number", correction)


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


def _corrected_rows(zero: NDArray[np.bool_], bad: NDArray[np.bool_], zero_cells: str) -> NDArray[np.bool_]:
    if zero_cells == "none":
        return np.zeros_like(zero)
    if zero_cells == "all_rows":
        return ~bad if bool((zero & ~bad).any()) else np.zeros_like(zero)
    return zero & ~bad


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
        zero cell; or none (zero-cell rows get NaN and the flag ``zero_cell``).

    Returns
    -------
    EffectResult

    Examples
    --------
    >>> r = logit_proportion([25, 0], [100, 10])
    >>> r.effect.round(4).tolist(), r.variance.round(4).tolist(), r.flags.tolist()
    ([-1.0986, -3.0445], [0.0533, 2.0952], ['', 'continuity_corrected'])
    """
    _check_correction("logit_proportion", correction, zero_cells)
    x, n = _floats("logit_proportion", events=events, total=total)
    bad, items = _counts(x, n)
    zero = ((x == 0) | (x == n)) & ~bad
    corr = _corrected_rows(zero, bad, zero_cells)
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
    _check_correction(caller, correction, zero_cells)
    x1, n1, x2, n2 = _floats(caller, events1=events1, total1=total1, events2=events2, total2=total2)
    bad1, items1 = _counts(x1, n1)
    bad2, items2 = _counts(x2, n2)
    bad = bad1 | bad2
    items = [(code, m1 | m2) for (code, m1), (_, m2) in zip(items1, items2, strict=True)]
    a, b, c, d = x1, n1 - x1, x2, n2 - x2
    zero = ((a == 0) | (b == 0) | (c == 0) | (d == 0)) & ~bad
    double = (((a == 0) & (c == 0)) | ((b == 0) & (d == 0))) & ~bad
    corr = _corrected_rows(zero, bad, zero_cells)
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


# ---------------------------------------------------------------- two groups, continuous


def _groups(caller: str, arrays: dict[str, ArrayLike], need_positive_sd: bool):  # type: ignore[no-untyped-def]
    vals = _floats(caller, **arrays)
    missing, infinite = _missing(*vals)
    named = dict(zip(arrays, vals, strict=True))
    n1, n2, sd1, sd2 = named["n1"], named["n2"], named["sd1"], named["sd2"]
    with np.errstate(invalid="ignore"):
        small = (n1 < 2) | (n2 < 2)
        negative = (sd1 < 0) | (sd2 < 0)
        zero_sd = ((sd1 == 0) | (sd2 == 0)) if need_positive_sd else (sd1 == 0) & (sd2 == 0)
        items = [
            ("missing_input", missing),
            ("nonfinite_input", infinite),
            ("sample_size_below_2", small),
            ("negative_sd", negative),
            ("zero_sd", zero_sd & ~negative),
        ]
        bad = missing | infinite | small | negative | zero_sd
        if "mean1" in named:
            nonpos = (named["mean1"] <= 0) | (named["mean2"] <= 0)
            if caller != "hedges_g":
                items.append(("nonpositive_mean", nonpos))
                bad = bad | nonpos
    return vals, bad, items


def hedges_j(df: ArrayLike, *, exact: bool = True) -> NDArray[np.float64]:
    """Small-sample factor ``J`` of Hedges' g for ``df`` degrees of freedom.

    Exact: ``J = Γ(df/2) / (sqrt(df/2) Γ((df - 1)/2))`` (Hedges 1981); approximate:
    ``J = 1 - 3 / (4 df - 1)`` (Borenstein et al. 2009, ch. 4).

    Examples
    --------
    >>> float(hedges_j(98).round(6)), float(hedges_j(98, exact=False).round(6))
    (0.992324, 0.992327)
    """
    m = np.asarray(df, dtype=np.float64)
    if not exact:
        return 1 - 3 / (4 * m - 1)
    with np.errstate(all="ignore"):
        return np.exp(gammaln(m / 2) - gammaln((m - 1) / 2)) / np.sqrt(m / 2)


def hedges_g(
    mean1: ArrayLike,
    sd1: ArrayLike,
    n1: ArrayLike,
    mean2: ArrayLike,
    sd2: ArrayLike,
    n2: ArrayLike,
    *,
    exact: bool = True,
) -> EffectResult:
    """Hedges' g, the bias-corrected standardised mean difference of group 1 minus 2.

    ``d = (m1 - m2) / s_pooled`` with ``s_pooled² = ((n1-1) sd1² + (n2-1) sd2²) / (n1+n2-2)``,
    ``V_d = (n1+n2)/(n1 n2) + d² / (2 (n1+n2))``, ``g = J d``, ``V_g = J² V_d``
    (Borenstein et al. 2009, ch. 4), with ``J`` from :func:`hedges_j` for
    ``df = n1 + n2 - 2`` (exact by default).

    Examples
    --------
    >>> r = hedges_g([103], [5.5], [50], [100], [4.5], [50])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(4))
    (0.5924, 0.0411)
    """
    (m1, s1, k1, m2, s2, k2), bad, items = _groups(
        "hedges_g", {"mean1": mean1, "sd1": sd1, "n1": n1, "mean2": mean2, "sd2": sd2, "n2": n2}, False
    )
    with np.errstate(all="ignore"):
        df = k1 + k2 - 2
        sp = np.sqrt(((k1 - 1) * s1**2 + (k2 - 1) * s2**2) / df)
        d = (m1 - m2) / sp
        vd = (k1 + k2) / (k1 * k2) + d**2 / (2 * (k1 + k2))
        j = hedges_j(df, exact=exact)
    return _finish(j * d, j**2 * vd, bad, items)


def log_response_ratio(
    mean1: ArrayLike,
    sd1: ArrayLike,
    n1: ArrayLike,
    mean2: ArrayLike,
    sd2: ArrayLike,
    n2: ArrayLike,
    *,
    bias_correction: bool = False,
) -> EffectResult:
    """Log response ratio ``ln(m1 / m2)`` (Hedges, Gurevitch & Curtis 1999).

    Variance ``sd1²/(n1 m1²) + sd2²/(n2 m2²)``. With ``bias_correction`` (Lajeunesse
    2015, Ecology 96:2056), the effect gains ``(sd1²/(n1 m1²) - sd2²/(n2 m2²)) / 2``
    and the variance ``(sd1⁴/(n1² m1⁴) + sd2⁴/(n2² m2⁴)) / 2``. Means must be > 0
    (else NaN, flag ``nonpositive_mean``).

    Examples
    --------
    >>> r = log_response_ratio([12], [3], [20], [10], [2], [20])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(6))
    (0.1823, 0.005125)
    """
    (m1, s1, k1, m2, s2, k2), bad, items = _groups(
        "log_response_ratio",
        {"mean1": mean1, "sd1": sd1, "n1": n1, "mean2": mean2, "sd2": sd2, "n2": n2},
        False,
    )
    with np.errstate(all="ignore"):
        a1 = s1**2 / (k1 * m1**2)
        a2 = s2**2 / (k2 * m2**2)
        effect = np.log(m1 / m2)
        variance = a1 + a2
        if bias_correction:
            effect = effect + 0.5 * (a1 - a2)
            variance = variance + 0.5 * (a1**2 + a2**2)
    return _finish(effect, variance, bad, items)


def ln_vr(sd1: ArrayLike, n1: ArrayLike, sd2: ArrayLike, n2: ArrayLike) -> EffectResult:
    """Log variability ratio (Nakagawa et al. 2015, Methods Ecol. Evol. 6:143).

    ``lnVR = ln(sd1 / sd2) + 1/(2(n1-1)) - 1/(2(n2-1))``, variance
    ``1/(2(n1-1)) + 1/(2(n2-1))``. SDs must be > 0 (else flag ``zero_sd`` or
    ``negative_sd``).

    Examples
    --------
    >>> r = ln_vr([3], [11], [2], [21])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(4))
    (0.4305, 0.075)
    """
    (s1, k1, s2, k2), bad, items = _groups("ln_vr", {"sd1": sd1, "n1": n1, "sd2": sd2, "n2": n2}, True)
    with np.errstate(all="ignore"):
        effect = np.log(s1 / s2) + 1 / (2 * (k1 - 1)) - 1 / (2 * (k2 - 1))
        variance = 1 / (2 * (k1 - 1)) + 1 / (2 * (k2 - 1))
    return _finish(effect, variance, bad, items)


def ln_cvr(
    mean1: ArrayLike,
    sd1: ArrayLike,
    n1: ArrayLike,
    mean2: ArrayLike,
    sd2: ArrayLike,
    n2: ArrayLike,
) -> EffectResult:
    """Log coefficient-of-variation ratio (Nakagawa et al. 2015).

    ``lnCVR = ln((sd1/m1) / (sd2/m2)) + 1/(2(n1-1)) - 1/(2(n2-1))``, variance
    ``sd1²/(n1 m1²) + 1/(2(n1-1)) + sd2²/(n2 m2²) + 1/(2(n2-1))`` (sample mean and SD
    taken as uncorrelated within a group, as they are for normal data). Means and SDs
    must be > 0.

    Examples
    --------
    >>> r = ln_cvr([12], [3], [20], [10], [2], [20])
    >>> float(r.effect[0].round(4)), float(r.variance[0].round(4))
    (0.2231, 0.0578)
    """
    (m1, s1, k1, m2, s2, k2), bad, items = _groups(
        "ln_cvr", {"mean1": mean1, "sd1": sd1, "n1": n1, "mean2": mean2, "sd2": sd2, "n2": n2}, True
    )
    with np.errstate(all="ignore"):
        effect = np.log((s1 / m1) / (s2 / m2)) + 1 / (2 * (k1 - 1)) - 1 / (2 * (k2 - 1))
        variance = s1**2 / (k1 * m1**2) + 1 / (2 * (k1 - 1)) + s2**2 / (k2 * m2**2) + 1 / (2 * (k2 - 1))
    return _finish(effect, variance, bad, items)


# ---------------------------------------------------------------- correlation


def fisher_z(r: ArrayLike, n: ArrayLike) -> EffectResult:
    """Fisher's z of a correlation, ``atanh(r)``, with variance ``1 / (n - 3)``.

    Rows with ``n <= 3`` (flag ``sample_size_at_most_3``), ``|r| > 1``
    (``correlation_out_of_range``) or ``|r| == 1`` (``correlation_at_bound``) get NaN
    (Borenstein et al. 2009, ch. 6).

    Examples
    --------
    >>> res = fisher_z([0.5, 1.2], [103, 50])
    >>> res.effect.round(4).tolist(), res.variance.round(4).tolist(), res.flags.tolist()
    ([0.5493, nan], [0.01, nan], ['', 'correlation_out_of_range'])
    """
    rr, nn = _floats("fisher_z", r=r, n=n)
    missing, infinite = _missing(rr, nn)
    with np.errstate(all="ignore"):
        small = nn <= 3
        out = np.abs(rr) > 1
        bound = np.abs(rr) == 1
        effect = np.arctanh(rr)
        variance = 1 / (nn - 3)
    items = [
        ("missing_input", missing),
        ("nonfinite_input", infinite),
        ("sample_size_at_most_3", small),
        ("correlation_out_of_range", out),
        ("correlation_at_bound", bound),
    ]
    return _finish(effect, variance, missing | infinite | small | out | bound, items)


# ---------------------------------------------------------------- tables

#: kind -> (function, column keywords in order, option keywords it accepts)
KINDS: dict[str, tuple[Callable[..., EffectResult], tuple[str, ...], tuple[str, ...]]] = {
    "logit_proportion": (logit_proportion, ("events", "total"), ("correction", "zero_cells")),
    "arcsine_proportion": (arcsine_proportion, ("events", "total"), ()),
    "freeman_tukey": (freeman_tukey, ("events", "total"), ()),
    "log_odds_ratio": (log_odds_ratio, ("events1", "total1", "events2", "total2"), ("correction", "zero_cells")),
    "log_risk_ratio": (log_risk_ratio, ("events1", "total1", "events2", "total2"), ("correction", "zero_cells")),
    "hedges_g": (hedges_g, ("mean1", "sd1", "n1", "mean2", "sd2", "n2"), ("exact",)),
    "log_response_ratio": (log_response_ratio, ("mean1", "sd1", "n1", "mean2", "sd2", "n2"), ("bias_correction",)),
    "fisher_z": (fisher_z, ("r", "n"), ()),
    "ln_vr": (ln_vr, ("sd1", "n1", "sd2", "n2"), ()),
    "ln_cvr": (ln_cvr, ("mean1", "sd1", "n1", "mean2", "sd2", "n2"), ()),
}  # fmt: skip


def _numeric(col: pd.Series) -> NDArray[np.float64]:
    """A column as float64 (see :func:`envlink.tables.parse_numbers`); unreadable cells are NaN."""
    return parse_numbers(col)[0]


def _mark_unreadable(flags: NDArray[np.object_], unreadable: NDArray[np.bool_],
                     blank: NDArray[np.bool_]) -> NDArray[np.object_]:
    """Name rows with a cell that is not a number; ``missing_input`` stays only for blanks."""
    out = flags.copy()
    for i in np.flatnonzero(unreadable):
        codes = [c for c in str(flags[i]).split(";") if c and (c != "missing_input" or blank[i])]
        out[i] = ";".join(["unreadable_number", *codes])
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
        One of the keys of :data:`KINDS`.
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
    caller = "effect_sizes"
    if kind not in KINDS:
        raise param_error("kind", caller, "one of " + ", ".join(map(repr, KINDS)), kind)
    func, needed, takes = KINDS[kind]
    given = {"correction": correction, "zero_cells": zero_cells, "exact": exact, "bias_correction": bias_correction}
    for opt, value in given.items():
        if value is not None and opt not in takes:
            allowed = "left unset for this kind" if not takes else "unset; it takes only " + ", ".join(takes)
            raise param_error(opt, f"effect_sizes(kind={kind!r})", allowed, value)
    extra = sorted(set(columns) - set(needed))
    lacking = [k for k in needed if k not in columns]
    if extra or lacking:
        raise InputError(
            f"effect_sizes(kind={kind!r}) takes the column keywords {', '.join(needed)}"
            + (f"; missing {', '.join(lacking)}" if lacking else "")
            + (f"; unknown {', '.join(extra)}" if extra else "")
            + f". Example: effect_sizes(table, {kind!r}, "
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


from envlink.effects_groups import group_effects  # noqa: E402  (re-export; needs the kinds above)
