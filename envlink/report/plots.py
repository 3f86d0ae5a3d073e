"""Figures for the HTML report: each function takes plain arrays and returns a Figure.

Plot styling is our own: a muted palette, light grid, titles in plain words. Every
function is pure (no file I/O); :mod:`envlink.report.html` embeds the figures.
"""

from __future__ import annotations

import functools
import io
from collections.abc import Callable, Mapping, Sequence
from typing import Any, TypeVar

import matplotlib
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

_F = TypeVar("_F", bound=Callable[..., Any])

__all__ = [
    "figure_png",
    "site_map",
    "histogram",
    "flag_bars",
    "bubble_plot",
    "forest_plot",
    "funnel_plot",
    "residual_plot",
]

_INK = "#2b2d42"
_ACCENT = "#1b7f79"
_WARM = "#d1495b"
_SOFT = "#8d99ae"
_STATUS_COLOURS = {"ok": _ACCENT, "flagged": "#edae49", "rejected": _WARM}


def _plain_text(func: _F) -> _F:
    """Draw with user text taken literally: a '$' in a study label is not mathtext.

    Figures are made with the object API (no pyplot), so importing this module never
    changes the user's matplotlib backend or global state.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with matplotlib.rc_context({"text.parse_math": False}):
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def _new(figsize: tuple[float, float]) -> tuple[Figure, Axes]:
    fig = Figure(figsize=figsize)
    return fig, fig.subplots()


def _style(ax: Axes) -> None:
    ax.grid(True, color="#e6e6e6", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def figure_png(fig: Figure, *, dpi: int = 110) -> bytes:
    """Render ``fig`` to PNG bytes."""
    buf = io.BytesIO()
    with matplotlib.rc_context({"text.parse_math": False}):
        fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight")
    return buf.getvalue()


@_plain_text
def site_map(
    lat: np.ndarray,
    lon: np.ndarray,
    status: Sequence[str],
    *,
    field_lat: np.ndarray | None = None,
    field_lon: np.ndarray | None = None,
    field: np.ndarray | None = None,
    field_label: str = "",
) -> Figure:
    """Sites (coloured by locate status) over a 2-D covariate field (time mean)."""
    fig, ax = _new((7.5, 5.5))
    if field is not None and field_lat is not None and field_lon is not None:
        mesh = ax.pcolormesh(field_lon, field_lat, field, shading="nearest", cmap="viridis")
        fig.colorbar(mesh, ax=ax, label=field_label, shrink=0.8)
    lat = np.asarray(lat, dtype=float)
    lon = np.asarray(lon, dtype=float)
    status_a = np.asarray([str(s) for s in status])
    for name, colour in _STATUS_COLOURS.items():
        sel = (status_a == name) & np.isfinite(lat) & np.isfinite(lon)
        if sel.any():
            ax.scatter(lon[sel], lat[sel], s=28, c=colour, edgecolors="white",
                       linewidths=0.7, label=f"{name} ({int(sel.sum())})", zorder=3)
    ok = np.isfinite(lat) & np.isfinite(lon)
    if ok.any() and field is None:
        pad = 0.5
        ax.set_xlim(lon[ok].min() - pad, lon[ok].max() + pad)
        ax.set_ylim(lat[ok].min() - pad, lat[ok].max() + pad)
    ax.set_xlabel("longitude (°E)")
    ax.set_ylabel("latitude (°N)")
    ax.set_title("Located sites")
    ax.legend(loc="best", fontsize=8, frameon=True)
    ax.set_aspect("equal", adjustable="datalim")
    return fig


@_plain_text
def histogram(values: np.ndarray, *, label: str, title: str) -> Figure:
    """Distribution of one column's finite values."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    fig, ax = _new((5.5, 3.4))
    if v.size:
        ax.hist(v, bins=min(30, max(5, int(np.sqrt(v.size)) + 1)), color=_ACCENT, alpha=0.85,
                edgecolor="white")
    else:
        ax.text(0.5, 0.5, "no finite values", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel(label)
    ax.set_ylabel("rows")
    ax.set_title(title)
    _style(ax)
    return fig


@_plain_text
def flag_bars(counts: Mapping[str, int], *, title: str) -> Figure:
    """Horizontal bars: how many rows carry each QA flag."""
    items = sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))[:25]
    fig, ax = _new((6.0, 0.35 * max(len(items), 2) + 1.0))
    if items:
        names = [k for k, _ in items][::-1]
        vals = [v for _, v in items][::-1]
        ax.barh(names, vals, color=_SOFT)
        for i, v in enumerate(vals):
            ax.text(v, i, f" {v}", va="center", fontsize=8, color=_INK)
    else:
        ax.text(0.5, 0.5, "no flags", ha="center", va="center", transform=ax.transAxes)
        ax.set_yticks([])
    ax.set_xlabel("rows")
    ax.set_title(title)
    _style(ax)
    return fig


@_plain_text
def bubble_plot(
    x: np.ndarray,
    y: np.ndarray,
    weight: np.ndarray,
    *,
    line_x: np.ndarray,
    estimate: np.ndarray,
    ci_low: np.ndarray,
    ci_high: np.ndarray,
    pi_low: np.ndarray,
    pi_high: np.ndarray,
    xlabel: str,
    ylabel: str,
) -> Figure:
    """Effect against a moderator; bubble area proportional to the weight.

    The fitted line carries its confidence band (darker) and prediction band (lighter).
    """
    fig, ax = _new((6.5, 4.5))
    w = np.asarray(weight, dtype=float)
    size = 400.0 * w / np.nanmax(w) if np.isfinite(w).any() and np.nanmax(w) > 0 else 30.0
    ax.fill_between(line_x, pi_low, pi_high, color=_ACCENT, alpha=0.12, label="prediction band")
    ax.fill_between(line_x, ci_low, ci_high, color=_ACCENT, alpha=0.30, label="confidence band")
    ax.plot(line_x, estimate, color=_ACCENT, linewidth=2, label="fitted")
    ax.scatter(x, y, s=size, facecolors="none", edgecolors=_INK, linewidths=0.8, alpha=0.8,
               label="effects (area ∝ weight)")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title("Effect against moderator")
    ax.legend(fontsize=8, loc="best")
    _style(ax)
    return fig


@_plain_text
def forest_plot(
    labels: Sequence[str],
    y: np.ndarray,
    v: np.ndarray,
    *,
    pooled: float | None = None,
    pooled_low: float | None = None,
    pooled_high: float | None = None,
    level: float = 0.95,
    xlabel: str = "effect",
    max_rows: int = 80,
) -> Figure:
    """Each effect with its confidence interval, and the pooled estimate as a diamond."""
    from scipy.stats import norm

    y = np.asarray(y, dtype=float)
    se = np.sqrt(np.asarray(v, dtype=float))
    # beyond max_rows, the most precise effects (smallest SE), kept in table order: a
    # subset by value (e.g. the lowest effects) would misrepresent the spread
    order = np.sort(np.argsort(se, kind="stable")[:max_rows]) if y.size > max_rows else np.arange(y.size)
    zq = norm.ppf(0.5 + level / 2)
    n = order.size
    fig, ax = _new((6.8, 0.18 * n + 1.8))
    pos = np.arange(n, 0, -1)
    ax.hlines(pos, y[order] - zq * se[order], y[order] + zq * se[order], color=_SOFT, linewidth=1)
    w = 1.0 / np.maximum(se[order] ** 2, 1e-12)
    ax.scatter(y[order], pos, s=12 + 60 * w / w.max(), marker="s", color=_INK, zorder=3)
    if pooled is not None and pooled_low is not None and pooled_high is not None:
        ax.fill([pooled_low, pooled, pooled_high, pooled], [-0.6, -0.2, -0.6, -1.0], color=_WARM)
        ax.axvline(pooled, color=_WARM, linewidth=0.8, linestyle="--")
    has_pooled = pooled is not None and pooled_low is not None and pooled_high is not None
    ax.set_yticks(list(pos) + ([-0.6] if has_pooled else []))
    ax.set_yticklabels([str(labels[i]) for i in order] + (["pooled"] if has_pooled else []),
                       fontsize=6)
    ax.set_xlabel(xlabel)
    title = "Effects with confidence intervals"
    if y.size > max_rows:
        title += f" (the {max_rows} most precise of {y.size} shown)"
    ax.set_title(title)
    _style(ax)
    return fig


@_plain_text
def funnel_plot(
    y: np.ndarray,
    v: np.ndarray,
    *,
    pooled: float,
    egger_intercept: float | None = None,
    egger_slope: float | None = None,
    xlabel: str = "effect",
) -> Figure:
    """Effect against its standard error (inverted axis), with pseudo 95 % limits.

    Egger's regression of y/se on 1/se, ``y/se = b0 + b1/se``, is drawn in these
    axes as the line ``y = b1 + b0·se``.
    """
    y = np.asarray(y, dtype=float)
    se = np.sqrt(np.asarray(v, dtype=float))
    fig, ax = _new((5.8, 4.5))
    top = float(np.nanmax(se)) * 1.05 if se.size else 1.0
    s_line = np.linspace(0.0, top, 50)
    ax.plot(pooled - 1.96 * s_line, s_line, color=_SOFT, linestyle=":", label="pseudo 95% limits")
    ax.plot(pooled + 1.96 * s_line, s_line, color=_SOFT, linestyle=":")
    ax.axvline(pooled, color=_SOFT, linewidth=0.8)
    ax.scatter(y, se, s=18, color=_INK, alpha=0.75, zorder=3)
    if egger_intercept is not None and egger_slope is not None:
        ax.plot(egger_slope + egger_intercept * s_line, s_line, color=_WARM, linewidth=1.5,
                label="Egger's regression line")
    ax.set_ylim(top, 0.0)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("standard error")
    ax.set_title("Funnel plot")
    ax.legend(fontsize=8, loc="lower right")
    _style(ax)
    return fig


@_plain_text
def residual_plot(fitted: np.ndarray, residual: np.ndarray, *, ylabel: str) -> Figure:
    """Residuals against fitted values, with a zero line and ±2 guides for standardised ones."""
    fig, ax = _new((5.8, 4.0))
    ax.scatter(fitted, residual, s=18, color=_INK, alpha=0.75)
    ax.axhline(0.0, color=_SOFT)
    if "standardised" in ylabel:
        for level in (-2.0, 2.0):
            ax.axhline(level, color=_WARM, linestyle=":", linewidth=0.8)
    ax.set_xlabel("fitted value")
    ax.set_ylabel(ylabel)
    ax.set_title("Residuals against fitted values")
    _style(ax)
    return fig
