"""Effect sizes from group means and SDs, and from correlations (Fisher's z).

The mean, SD and correlation kinds of :data:`envlink.effects.kinds.EFFECT_KINDS`;
:mod:`envlink.effects` re-exports them.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import gammaln

from envlink.effects.core import EffectResult, _finish, _floats, _missing

__all__ = ["hedges_j", "hedges_g", "log_response_ratio", "ln_vr", "ln_cvr", "fisher_z"]


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
