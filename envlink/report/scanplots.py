"""Figures of the honest-inference results: the scan heatmap, its null maxima, correlogram, funnel.

Each function takes a result object (or plain arrays) and returns a matplotlib
:class:`~matplotlib.figure.Figure` made with the object API (no pyplot, no global
state). The look is envlink's own: lag runs down, span runs across, the signed
statistic on a blue-to-copper scale centred on zero, the best window boxed, and the
family-wise p and the number of windows tried in every title.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
from matplotlib.colors import LinearSegmentedColormap, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

__all__ = ["scan_heatmap", "null_maxima", "correlogram_plot", "residual_funnel",
           "save_scan_figure", "SCAN_COLOURS"]

#: the scan's diverging scale: deep blue (negative) - paper - copper (positive)
SCAN_COLOURS = LinearSegmentedColormap.from_list(
    "envlink_scan", ["#1d3557", "#5c86b0", "#f4f1ea", "#d08c4f", "#7a3b10"])
_INK = "#22303c"
_MARK = "#0b6e4f"


def _fp(p: float | None) -> str:
    return "not computed" if p is None else f"{p:.3g}"


def _panels(result: Any) -> list[tuple[dict[str, Any], str]]:
    t = result.table
    keys = [c for c in ("stat", "anchor") if c in t.columns]
    if not keys:
        return [({}, "")]
    combos = t[keys].drop_duplicates().to_dict("records")
    return [(c, ", ".join(f"{v}" for v in c.values())) for c in combos]


def scan_heatmap(result: Any, value: str = "statistic") -> Figure:
    """One lag × span panel per statistic and anchor, the best window boxed.

    Parameters
    ----------
    result : ScanResult
        With ``lag`` and ``span`` descriptors (:func:`envlink.scan` gives them).
    value : str
        The table column drawn (default the signed z or t).
    """
    panels = _panels(result)
    t = result.table
    vals = t[value].to_numpy(dtype=np.float64)
    lim = float(np.nanmax(np.abs(vals))) if np.isfinite(vals).any() else 1.0
    norm = TwoSlopeNorm(vcenter=0.0, vmin=-lim or -1.0, vmax=lim or 1.0)
    ncol = min(3, len(panels))
    nrow = int(np.ceil(len(panels) / ncol))
    with matplotlib.rc_context({"text.parse_math": False}):
        fig = Figure(figsize=(3.6 * ncol + 0.8, 3.0 * nrow + 0.9))
        axes = np.atleast_1d(fig.subplots(nrow, ncol, squeeze=False)).ravel()
        best = t.loc[result.best]
        image = None
        for ax, (select, label) in zip(axes, panels, strict=False):
            grid = result.heatmap(value, **select)
            image = ax.imshow(grid.to_numpy(dtype=np.float64), cmap=SCAN_COLOURS, norm=norm,
                              aspect="auto", origin="upper", interpolation="nearest")
            ax.set_xticks(range(grid.shape[1]), [str(c) for c in grid.columns], fontsize=7)
            ax.set_yticks(range(grid.shape[0]), [str(r) for r in grid.index], fontsize=7)
            unit = str(t["unit"].iloc[0]) if "unit" in t.columns else ""
            ax.set_xlabel(f"span ({unit})", color=_INK, fontsize=8)
            ax.set_ylabel(f"lag ({unit})", color=_INK, fontsize=8)
            ax.set_title(label, color=_INK, fontsize=9, loc="left")
            if all(best.get(k) == v for k, v in select.items()):
                i = list(grid.index).index(best["lag"])
                j = list(grid.columns).index(best["span"])
                ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, edgecolor=_MARK,
                                       linewidth=2.2))
            for side in ax.spines.values():
                side.set_visible(False)
        for ax in axes[len(panels):]:
            ax.set_visible(False)
        if image is not None:
            bar = fig.colorbar(image, ax=list(axes[:len(panels)]), shrink=0.85)
            bar.set_label(f"{value} of the window's slope", color=_INK, fontsize=8)
        fig.suptitle(f"Window scan: {result.n_windows} windows tried; best {result.best} "
                     f"(boxed), family-wise p {_fp(result.family_p)}", color=_INK, fontsize=10,
                     x=0.01, ha="left")
    return fig


def null_maxima(result: Any) -> Figure:
    """The permutation distribution of the family's largest statistic, the observed one marked."""
    with matplotlib.rc_context({"text.parse_math": False}):
        fig = Figure(figsize=(5.4, 2.8))
        ax = fig.subplots()
        mx = np.asarray(result.maxima, dtype=np.float64)
        mx = mx[np.isfinite(mx)]
        if mx.size:
            ax.hist(mx, bins=min(40, max(10, mx.size // 25)), color="#9fb3c8", edgecolor="white")
        obs = abs(float(result.best_row["statistic"]))
        ax.axvline(obs, color=_MARK, linewidth=2)
        ax.set_xlabel(f"largest {result.statistic_kind} over {result.n_windows} windows, per "
                      "permutation", fontsize=8, color=_INK)
        ax.set_ylabel("permutations", fontsize=8, color=_INK)
        ax.set_title(f"observed {obs:.3g} (line); family-wise p {_fp(result.family_p)}",
                     fontsize=9, loc="left", color=_INK)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig


def correlogram_plot(bands: Any) -> Figure:
    """Moran's I by distance band with its null mean (a :class:`Correlogram`'s table)."""
    with matplotlib.rc_context({"text.parse_math": False}):
        fig = Figure(figsize=(5.4, 2.8))
        ax = fig.subplots()
        t = bands.table
        mid = (t["from_km"] + t["to_km"]) / 2.0
        ax.axhline(0.0, color="#c9c9c9", linewidth=0.8)
        ax.plot(mid, t["expected"], color="#9fb3c8", linestyle="--", linewidth=1, label="null mean")
        sig = t["p"] < 0.05
        ax.plot(mid, t["I"], color=_INK, linewidth=1.2)
        ax.scatter(mid[~sig], t["I"][~sig], facecolor="white", edgecolor=_INK, zorder=3, s=22)
        ax.scatter(mid[sig], t["I"][sig], color=_MARK, zorder=3, s=26, label="p < 0.05")
        ax.set_xlabel("distance band (km, great circle)", fontsize=8, color=_INK)
        ax.set_ylabel("Moran's I of residuals", fontsize=8, color=_INK)
        ax.legend(frameon=False, fontsize=7)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig


def residual_funnel(residual: np.ndarray, se: np.ndarray, *, label: str = "") -> Figure:
    """Residuals of the fitted model against their sampling SE, with ±1.96 SE limits."""
    with matplotlib.rc_context({"text.parse_math": False}):
        fig = Figure(figsize=(4.8, 3.4))
        ax = fig.subplots()
        se = np.asarray(se, dtype=np.float64)
        top = float(np.nanmax(se)) if se.size else 1.0
        s = np.linspace(0.0, top * 1.05, 50)
        ax.fill_betweenx(s, -1.96 * s, 1.96 * s, color="#eef2f5")
        ax.axvline(0.0, color="#9fb3c8", linewidth=1)
        ax.scatter(residual, se, s=16, color=_INK, alpha=0.75)
        ax.set_ylim(top * 1.05, 0.0)
        ax.set_xlabel("residual of the fitted model (effect − fitted)", fontsize=8, color=_INK)
        ax.set_ylabel("sampling SE", fontsize=8, color=_INK)
        if label:
            ax.set_title(label, fontsize=9, loc="left", color=_INK)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    return fig


def save_scan_figure(result: Any, path: str | os.PathLike[str]) -> Path:
    """Write :func:`scan_heatmap` to ``path`` (``.png`` or ``.svg``) atomically."""
    from envlink.core.util import atomic_path

    p = Path(path)
    fig = scan_heatmap(result)
    with atomic_path(p) as tmp, matplotlib.rc_context({"text.parse_math": False}):
        fig.savefig(tmp, format=p.suffix.lstrip(".").lower() or "png", dpi=120,
                    bbox_inches="tight")
    return p
