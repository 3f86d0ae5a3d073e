"""Parsing and validation of the string options of :func:`envlink.attach`.

The forms are those of the ``envlink attach`` command (DESIGN.md §4): statistics
(``mean``, ``quantile:0.9``, ``above:29``, ``degree-days:28``, ``anomaly``, ``mmm``,
``dhw-max`` ...), windows (``period``, ``lag:3M``, ``before-start:90D`` ...), spatial
rules (``nearest``, ``bilinear``, ``nearest-valid:25km``, ``buffer:50km``,
``polygon``) and baselines (``1985-2012``). Bad values raise
:class:`envlink.errors.InputError` with the project's parameter message.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from envlink._util import did_you_mean
from envlink.errors import InputError, param_error

__all__ = [
    "StatSpec",
    "WindowSpec",
    "SpatialSpec",
    "parse_stat",
    "parse_window",
    "parse_spatial",
    "parse_baseline",
    "STATS",
    "WINDOWS",
    "RULES",
]

CALLER = "attach"
STATS = ("mean", "min", "max", "sum", "std", "quantile", "above", "degree-days", "anomaly", "mmm", "dhw-max")
WINDOWS = ("period", "lag", "before-start", "after-end", "around-mid")
RULES = ("nearest", "bilinear", "nearest-valid", "buffer", "polygon")
_STAT_ALLOWED = (
    "one of 'mean', 'min', 'max', 'sum', 'std', 'quantile:Q' (0 <= Q <= 1), 'above:T', "
    "'degree-days:T', 'anomaly', 'mmm', 'dhw-max'"
)
_WINDOW_ALLOWED = (
    "'period' or one of 'lag', 'before-start', 'after-end', 'around-mid' followed by "
    "':N' and a unit D, M or Y (e.g. 'lag:3M')"
)
_RULE_ALLOWED = (
    "one of 'nearest', 'bilinear', 'nearest-valid:Dkm', 'buffer:Rkm', 'polygon' "
    "(D, R positive distances in km)"
)


@dataclass(frozen=True)
class StatSpec:
    """A parsed statistic: its kind and its parameter (quantile or threshold)."""

    kind: str
    q: float | None = None
    threshold: float | None = None

    def label(self) -> str:
        """The canonical text form, e.g. ``'above:29'``."""
        if self.kind == "quantile":
            return f"quantile:{self.q:g}"
        if self.kind in ("above", "degree-days"):
            return f"{self.kind}:{self.threshold:g}"
        return self.kind


@dataclass(frozen=True)
class WindowSpec:
    """A parsed window: its kind and its length ``n`` in ``unit`` (D, M or Y)."""

    kind: str
    n: int = 0
    unit: str = "D"

    def label(self) -> str:
        """The canonical text form, e.g. ``'lag:3M'``."""
        return self.kind if self.kind == "period" else f"{self.kind}:{self.n}{self.unit}"


@dataclass(frozen=True)
class SpatialSpec:
    """A parsed spatial rule and its distance in km (nearest-valid, buffer)."""

    kind: str
    km: float | None = None

    def label(self) -> str:
        """The canonical text form, e.g. ``'buffer:50km'``."""
        return f"{self.kind}:{self.km:g}km" if self.km is not None else self.kind


def _choice_error(param: str, allowed: str, value: object, kind: str, choices: tuple[str, ...]) -> InputError:
    err = param_error(param, CALLER, allowed, value)
    return InputError(str(err) + did_you_mean(kind, choices))


def _number(text: str) -> float | None:
    try:
        x = float(text)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def parse_stat(stat: str | StatSpec, threshold: float | None = None) -> StatSpec:
    """Parse a statistic; ``threshold`` may give T for ``above`` / ``degree-days``.

    Examples
    --------
    >>> parse_stat("quantile:0.9")
    StatSpec(kind='quantile', q=0.9, threshold=None)
    >>> parse_stat("above", threshold=29).label()
    'above:29'
    """
    if isinstance(stat, StatSpec):
        return stat
    if not isinstance(stat, str):
        raise param_error("stat", CALLER, _STAT_ALLOWED, stat)
    kind, _, arg = stat.strip().lower().partition(":")
    if kind not in STATS:
        raise _choice_error("stat", _STAT_ALLOWED, stat, kind, STATS)
    if kind == "quantile":
        q = _number(arg)
        if q is None or not 0.0 <= q <= 1.0:
            raise param_error("stat", CALLER, "'quantile:Q' with Q a number from 0 to 1", stat)
        return StatSpec(kind, q=q)
    if kind in ("above", "degree-days"):
        t = _number(arg) if arg else (float(threshold) if threshold is not None else None)
        if t is None:
            raise param_error(
                "stat", CALLER, f"'{kind}:T' with T a threshold in the grid's units (or threshold=T)", stat
            )
        return StatSpec(kind, threshold=t)
    if arg:
        raise param_error("stat", CALLER, f"{kind!r} without a ':' argument", stat)
    return StatSpec(kind)


def parse_window(window: str | WindowSpec) -> WindowSpec:
    """Parse a window.

    Examples
    --------
    >>> parse_window("lag:3M")
    WindowSpec(kind='lag', n=3, unit='M')
    """
    if isinstance(window, WindowSpec):
        return window
    if not isinstance(window, str):
        raise param_error("window", CALLER, _WINDOW_ALLOWED, window)
    text = window.strip().lower()
    if text == "period":
        return WindowSpec("period")
    kind, _, arg = text.partition(":")
    if kind not in WINDOWS:
        raise _choice_error("window", _WINDOW_ALLOWED, window, kind, WINDOWS)
    m = re.fullmatch(r"\s*(\d+)\s*([dmy])\s*", arg)
    if not m or int(m.group(1)) <= 0:
        raise param_error("window", CALLER, _WINDOW_ALLOWED + " with N a positive whole number", window)
    return WindowSpec(kind, int(m.group(1)), m.group(2).upper())


def parse_spatial(spatial: str | SpatialSpec) -> SpatialSpec:
    """Parse a spatial rule.

    Examples
    --------
    >>> parse_spatial("nearest-valid:25km")
    SpatialSpec(kind='nearest-valid', km=25.0)
    """
    if isinstance(spatial, SpatialSpec):
        return spatial
    if not isinstance(spatial, str):
        raise param_error("spatial", CALLER, _RULE_ALLOWED, spatial)
    kind, _, arg = spatial.strip().lower().partition(":")
    if kind not in RULES:
        raise _choice_error("spatial", _RULE_ALLOWED, spatial, kind, RULES)
    if kind in ("nearest-valid", "buffer"):
        km = _number(arg[:-2] if arg.endswith("km") else arg)
        if km is None or km <= 0:
            raise param_error("spatial", CALLER, f"'{kind}:Dkm' with D a positive distance in km", spatial)
        return SpatialSpec(kind, km)
    if arg:
        raise param_error("spatial", CALLER, f"{kind!r} without a ':' argument", spatial)
    return SpatialSpec(kind)


def parse_baseline(baseline: str | tuple[int, int] | None) -> tuple[int, int] | None:
    """Parse ``'YYYY-YYYY'`` (inclusive years) or a pair of years; None stays None.

    Examples
    --------
    >>> parse_baseline("1985-2012")
    (1985, 2012)
    """
    if baseline is None:
        return None
    if isinstance(baseline, tuple | list) and len(baseline) == 2:
        y0, y1 = int(baseline[0]), int(baseline[1])
    else:
        m = re.fullmatch(r"\s*(\d{4})\s*[-/]\s*(\d{4})\s*", str(baseline))
        if not m:
            raise param_error("baseline", CALLER, "two years 'YYYY-YYYY' (inclusive)", baseline)
        y0, y1 = int(m.group(1)), int(m.group(2))
    if y1 < y0:
        raise param_error("baseline", CALLER, "two years 'YYYY-YYYY' with the first not after the second", baseline)
    return y0, y1
