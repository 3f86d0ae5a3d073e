"""Figures for the HTML report: each function takes plain arrays and returns a Figure.

Plot styling is envlink's own: a palette of slate, sea blue, coral, sand and mist,
left-aligned titles in plain words, open axes. Every
function is pure (no file I/O); :mod:`envlink.report.html` embeds the figures.
"""

from __future__ import annotations

import contextlib
import functools
import io
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
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

# envlink's palette: slate ink, sea blue, coral, sand and mist, chosen here for the report
_INK = "#22313f"
_SEA = "#1d6f8a"
_CORAL = "#c8553d"
_SAND = "#e0a458"
_MIST = "#c9d3da"
_ACCENT = _SEA
_WARM = _CORAL
_SOFT = "#7f8c97"
_STATUS_COLOURS = {"ok": _SEA, "flagged": _SAND, "rejected": _CORAL}
#: User text is drawn literally: no mathtext on '$...$', no LaTeX even where the user's
#: matplotlibrc asks for it (a '\\', '_' or '<script>' in a label must not break a figure).
_LITERAL_TEXT: dict[Any, Any] = {"text.parse_math": False, "text.usetex": False}


@contextlib.contextmanager
def _literal_text() -> Iterator[None]:
    """User text drawn as written; a character the font lacks (a tab, a script) is a box, not a warning."""
    with matplotlib.rc_context(_LITERAL_TEXT), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from", category=UserWarning)
        yield


def _plain_text(func: _F) -> _F:
    """Draw with user text taken literally: a '$' in a study label is not mathtext.

    Figures are made with the object API (no pyplot), so importing this module never
    changes the user's matplotlib backend or global state.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with _literal_text():
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def _new(figsize: tuple[float, float]) -> tuple[Figure, Axes]:
    fig = Figure(figsize=figsize)
    return fig, fig.subplots()


def _style(ax: Axes) -> None:
    ax.grid(True, axis="both", color="#edf1f3", linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def figure_png(fig: Figure, *, dpi: int = 110) -> bytes:
    """Render ``fig`` to PNG bytes."""
    buf = io.BytesIO()
    with _literal_text():
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
    # fixed limits (no field) keep their box; a field lets the data limits adjust
    ax.set_aspect("equal", adjustable="box" if field is None else "datalim")
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
    level: float = 0.95,
) -> Figure:
    """Effect against a moderator; bubble area proportional to the weight.

    envlink's look: sea-blue bubbles (area ∝ weight), the fitted mean in coral inside a
    coral confidence band, and the prediction band as sand-coloured dashed edges with a
    faint fill, so the two bands read apart even in grey.
    """
    fig, ax = _new((6.8, 4.6))
    w = np.asarray(weight, dtype=float)
    size = 25.0 + 420.0 * w / np.nanmax(w) if np.isfinite(w).any() and np.nanmax(w) > 0 else 40.0
    pct = f"{level:.0%}"
    ax.fill_between(line_x, pi_low, pi_high, color=_SAND, alpha=0.10, linewidth=0)
    for edge, name in ((pi_low, f"{pct} prediction band"), (pi_high, None)):
        ax.plot(line_x, edge, color=_SAND, linewidth=1.4, linestyle=(0, (5, 3)), label=name)
    ax.fill_between(line_x, ci_low, ci_high, color=_CORAL, alpha=0.22, linewidth=0,
                    label=f"{pct} confidence band")
    ax.scatter(x, y, s=size, color=_SEA, alpha=0.35, edgecolors=_SEA, linewidths=1.0,
               label="effects (area ∝ weight)", zorder=2)
    ax.plot(line_x, estimate, color=_CORAL, linewidth=2.2, label="fitted mean", zorder=3)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title(f"{ylabel} along {xlabel}", loc="left", fontsize=11, color=_INK)
    ax.legend(fontsize=8, loc="best", frameon=False)
    _style(ax)
    return fig


def _order_rows(y: np.ndarray, se: np.ndarray, labels: Sequence[str], order: Callable[..., Any],
                max_rows: int) -> np.ndarray:
    """Rows to draw, top to bottom: beyond ``max_rows`` the most precise, then ``order``."""
    keep = np.argsort(se, kind="stable")[:max_rows] if y.size > max_rows else np.arange(y.size)
    keep = np.sort(keep)
    ranked = np.asarray(order(y[keep], se[keep], [labels[i] for i in keep]), dtype=int)
    return keep[ranked]


def _by_table(y: np.ndarray, se: np.ndarray, labels: Sequence[str]) -> np.ndarray:
    return np.arange(y.size)


@_plain_text
def forest_plot(
    labels: Sequence[str],
    y: np.ndarray,
    v: np.ndarray,
    *,
    summary: Mapping[str, Any] | None = None,
    level: float = 0.95,
    xlabel: str = "effect",
    max_rows: int = 80,
    order: Callable[..., Any] | None = None,
) -> Figure:
    """Each effect with its confidence interval and its value, and a summary row.

    Parameters
    ----------
    labels : sequence of str
        One label per effect (a study, site or year).
    y, v : arrays
        Effects and sampling variances; each interval is ``y ± z · sqrt(v)`` at ``level``.
    summary : mapping, optional
        ``label``, ``estimate``, ``low``, ``high`` (drawn as a diamond) and optionally
        ``pi_low``, ``pi_high`` (a whisker through the diamond: the prediction interval).
    order : callable, optional
        ``order(y, se, labels) -> positions``, top row first (default: table order).
        Beyond ``max_rows`` rows, the most precise effects are kept first.
    """
    from scipy.stats import norm

    y = np.asarray(y, dtype=float)
    se = np.sqrt(np.asarray(v, dtype=float))
    rows = _order_rows(y, se, labels, order or _by_table, max_rows)
    zq = norm.ppf(0.5 + level / 2)
    n = rows.size
    fig, ax = _new((7.6, 0.2 * (n + 2) + 1.6))
    pos = np.arange(n, 0, -1, dtype=float)
    lo, hi = y[rows] - zq * se[rows], y[rows] + zq * se[rows]
    ax.hlines(pos, lo, hi, color=_SOFT, linewidth=1.0)
    w = 1.0 / np.maximum(se[rows] ** 2, 1e-12)
    ax.scatter(y[rows], pos, s=10 + 70 * w / w.max(), marker="s", color=_SEA, zorder=3)
    ticks, names = list(pos), [str(labels[i]) for i in rows]
    values = [f"{a:.2f} [{b:.2f}, {c:.2f}]" for a, b, c in zip(y[rows], lo, hi, strict=True)]
    if summary is not None:
        est, slo, shi = (float(summary[k]) for k in ("estimate", "low", "high"))
        if summary.get("pi_low") is not None and summary.get("pi_high") is not None:
            ax.hlines(-0.6, summary["pi_low"], summary["pi_high"], color=_SAND, linewidth=2.2)
        ax.fill([slo, est, shi, est], [-0.6, -0.25, -0.6, -0.95], color=_CORAL, zorder=4)
        ax.axvline(est, color=_CORAL, linewidth=0.8, linestyle=(0, (2, 2)))
        ax.axhline(0.2, color=_MIST, linewidth=0.8)
        ticks.append(-0.6)
        names.append(str(summary.get("label", "summary")))
        values.append(f"{est:.2f} [{slo:.2f}, {shi:.2f}]")
    ax.set_ylim(-1.3 if summary is not None else 0.3, n + 0.7)
    ax.set_yticks(ticks)
    ax.set_yticklabels(names, fontsize=7)
    side = ax.secondary_yaxis("right")
    side.set_yticks(ticks)
    side.set_yticklabels(values, fontsize=7, family="monospace")
    side.tick_params(length=0)
    ax.set_xlabel(f"{xlabel}  ({level:.0%} interval)")
    title = "Effects with their intervals"
    if y.size > max_rows:
        title += f" (the {max_rows} most precise of {y.size} shown)"
    ax.set_title(title, loc="left", fontsize=11, color=_INK)
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
    level: float = 0.95,
) -> Figure:
    """Effect against its standard error (most precise at the top), in envlink's look.

    The region where effects would fall at ``level`` if they all estimated ``pooled``
    is a mist-coloured wedge; effects are sand dots with slate edges. Egger's
    regression of y/se on 1/se, ``y/se = b0 + b1/se``, is drawn in these axes as the
    coral dashed line ``y = b1 + b0·se``.
    """
    from scipy.stats import norm

    y = np.asarray(y, dtype=float)
    se = np.sqrt(np.asarray(v, dtype=float))
    zq = float(norm.ppf(0.5 + level / 2))
    fig, ax = _new((6.0, 4.6))
    top = float(np.nanmax(se)) * 1.08 if se.size else 1.0
    s_line = np.linspace(0.0, top, 50)
    ax.fill_betweenx(s_line, pooled - zq * s_line, pooled + zq * s_line, color=_MIST, alpha=0.55,
                     linewidth=0, label=f"{level:.0%} region around the centre")
    ax.axvline(pooled, color=_SEA, linewidth=1.2, label="centre")
    ax.scatter(y, se, s=26, color=_SAND, edgecolors=_INK, linewidths=0.6, zorder=3, label="effects")
    if egger_intercept is not None and egger_slope is not None:
        ax.plot(egger_slope + egger_intercept * s_line, s_line, color=_CORAL, linewidth=1.6,
                linestyle=(0, (6, 2)), label="Egger's regression line")
    ax.set_ylim(top, 0.0)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("standard error (most precise at the top)")
    ax.set_title("Effects by precision", loc="left", fontsize=11, color=_INK)
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
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
