"""The report's sections on the data: locating, covariates and extraction QA, the cautions."""

from __future__ import annotations

import base64
import html
import re
from collections import Counter
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.flags import split_flags
from envlink.report import plots

__all__ = ["esc", "fmt", "figure_html", "table_html", "Raw", "locate_section", "covariate_section",
           "cautions"]


def esc(value: object) -> str:
    """``value`` as HTML-escaped text."""
    return html.escape(str(value), quote=True)


def fmt(value: object, digits: int = 4) -> str:
    """A table cell: numbers rounded, whole-number floats as integers, missing as a dash, text escaped."""
    if value is None:
        return "—"
    if isinstance(value, (float, np.floating)):
        fv = float(value)
        if not np.isfinite(fv):
            return "—"
        if fv.is_integer() and abs(fv) < 1e9:
            return str(int(fv))
        return f"{fv:.{digits}g}" if abs(fv) < 1e-3 or abs(fv) >= 1e5 else f"{fv:.{digits}f}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(fmt(v, digits) for v in value) + "]"
    return esc(value)


def figure_html(fig: Any, caption: str) -> str:
    """A figure as an embedded PNG with its caption."""
    data = base64.b64encode(plots.figure_png(fig)).decode("ascii")
    return (
        f'<figure><img alt="{esc(caption)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{esc(caption)}</figcaption></figure>"
    )


def table_html(header: Sequence[str], rows: Sequence[Sequence[object]], left: int = 1) -> str:
    """An HTML table; the first ``left`` columns are left-aligned, cells formatted by :func:`fmt`."""
    head = "".join(f'<th class="{"l" if i < left else ""}">{esc(h)}</th>' for i, h in enumerate(header))
    body = "".join(
        "<tr>" + "".join(
            f'<td class="{"l" if i < left else ""}">{c if isinstance(c, Raw) else fmt(c)}</td>'
            for i, c in enumerate(r)
        ) + "</tr>"
        for r in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


class Raw(str):
    """Already-escaped HTML for a table cell."""


_NUMBER = re.compile(r"\d+(?:\.\d+)?")


def _flag_counts(series: pd.Series, *, group_numbers: bool = True) -> Counter[str]:
    """Rows per QA flag; flags that differ only by a number (``nearest_valid_12km``,
    ``nearest_valid_19km``) count together as ``nearest_valid_Nkm``."""
    counts: Counter[str] = Counter()
    for cell in series.fillna("").astype(str):
        for flag in set(split_flags(cell)):
            if flag:
                counts[_NUMBER.sub("N", flag) if group_numbers else flag] += 1
    return counts


def locate_section(table: pd.DataFrame) -> str:
    """Locate statuses, QA flags and the reasons rows were rejected."""
    if "locate_status" not in table.columns:
        return "<p class='note'>The table carries no locate columns.</p>"
    status = table["locate_status"].fillna("").astype(str)
    rows = [(s, int((status == s).sum())) for s in ("ok", "flagged", "rejected")]
    out = "<p>Every input row is kept; rows that could not be located keep their place with a reason.</p>"
    out += table_html(["status", "rows"], rows)
    counts = _flag_counts(table.get("locate_flags", pd.Series(dtype=str)))
    if counts:
        out += table_html(["QA flag", "rows"], counts.most_common())
    rejected = table[status == "rejected"]
    if len(rejected) and "locate_notes" in table.columns:
        items = "".join(
            f"<li>row {int(i) + 1}: {esc(n)}</li>" for i, n in rejected["locate_notes"].head(30).items()
        )
        out += f"<details><summary>Why rows were rejected</summary><ul>{items}</ul></details>"
    return out


def covariate_section(table: pd.DataFrame, name: str, units: str) -> str:
    """One covariate: rows with a value, QA flags, distances, coverage and its distribution."""
    values = pd.to_numeric(table[name], errors="coerce") if name in table else pd.Series(dtype=float)
    finite = int(np.isfinite(values.to_numpy(dtype=float)).sum())
    out = f"<h3>{esc(name)}</h3>"
    out += table_html(
        ["", "rows"],
        [("with a value", finite), ("without a value", int(len(values) - finite))],
    )
    flags = _flag_counts(table.get(f"{name}_flags", pd.Series(dtype=str)))
    if flags:
        out += table_html(["QA flag", "rows"], flags.most_common())
        out += figure_html(plots.flag_bars(flags, title=f"QA flags of {name}"),
                       f"How many rows carry each QA flag of {name}.")
    dist = pd.to_numeric(table.get(f"{name}_distance_km", pd.Series(dtype=float)), errors="coerce")
    cov = pd.to_numeric(table.get(f"{name}_coverage", pd.Series(dtype=float)), errors="coerce")
    stats = []
    for label, s in (("distance to cell used (km)", dist), ("time coverage of window", cov)):
        arr = s.to_numpy(dtype=float)
        arr = arr[np.isfinite(arr)]
        if arr.size:
            stats.append((label, float(np.median(arr)), float(arr.min()), float(arr.max())))
    if stats:
        out += table_html(["", "median", "min", "max"], stats)
    out += figure_html(plots.histogram(values.to_numpy(dtype=float), label=f"{name} ({units})" if units else name,
                                   title=f"Distribution of {name}"),
                   f"Distribution of the covariate {name} over rows with a value.")
    return out


def cautions(multiple_testing: str) -> str:
    """How far to trust the results, in plain words.

    ``multiple_testing`` is the sentence on the windows tried and what the p-values
    correct (:func:`envlink.report.inference_html.multiple_testing_caution`).
    """
    items = [
        "Covariates read from grids are proxies: a grid cell averages conditions over tens of "
        "kilometres and a month or a day, not the conditions the animals met at the site.",
        "Reported coordinates and dates have their own precision (see site_precision_km and "
        "period_precision); a coarse coordinate or a season-long period blurs the match.",
        "Moderator associations across studies are observational: they show that effects "
        "differ with the covariate, not that the covariate caused the difference. Studies "
        "that differ in climate also differ in methods, hosts and years.",
        multiple_testing,
        "Sites on masked (land) cells were moved to the nearest valid cell only where the QA "
        "flags say so; check the distances above.",
    ]
    return "<div class='caution'><ul>" + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul></div>"
