"""The self-contained HTML report: what was done, how well, what the model says, how far to trust it.

Every figure is a PNG embedded as a data URI, so the report is one file that can be
mailed or archived. Every string that came from the user (column names, site names,
flags, formulas, provenance) is HTML-escaped.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import json
import os
import re
from collections import Counter
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from envlink._util import atomic_path
from envlink.report import plots

__all__ = ["write_report", "render_report"]

_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1040px;margin:2em auto;
padding:0 1em;color:#2b2d42;line-height:1.45}
h1{border-bottom:3px solid #1b7f79;padding-bottom:.2em}
h2{margin-top:2em;border-bottom:1px solid #d9d9d9;padding-bottom:.15em}
table{border-collapse:collapse;margin:.6em 0;font-size:.9em}
th,td{border:1px solid #d9d9d9;padding:.25em .55em;text-align:right}
th{background:#f1f4f4}td.l,th.l{text-align:left}
figure{margin:1em 0}figure img{max-width:100%;height:auto}
figcaption{font-size:.85em;color:#555}
.caution{background:#fff6e5;border-left:4px solid #edae49;padding:.6em 1em}
.note{color:#555;font-size:.9em}code{background:#f4f4f4;padding:0 .2em}
details pre{white-space:pre-wrap;font-size:.8em;background:#f7f7f7;padding:.6em}
"""

# Marks the page after load so a headless browser can check that every figure decoded.
_SELF_CHECK = """
window.addEventListener('error', function(){document.body.dataset.jsErrors =
  String(Number(document.body.dataset.jsErrors || 0) + 1);});
window.addEventListener('load', function(){
  var imgs = document.querySelectorAll('img'); var ok = 0;
  imgs.forEach(function(i){ if (i.complete && i.naturalWidth > 0) { ok += 1; } });
  document.body.dataset.figures = String(imgs.length);
  document.body.dataset.figuresRendered = String(ok);
});
"""


def _e(value: object) -> str:
    return html.escape(str(value), quote=True)


def _fmt(value: object, digits: int = 4) -> str:
    if value is None:
        return "—"
    if isinstance(value, (float, np.floating)):
        fv = float(value)
        if not np.isfinite(fv):
            return "—"
        return f"{fv:.{digits}g}" if abs(fv) < 1e-3 or abs(fv) >= 1e5 else f"{fv:.{digits}f}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_fmt(v, digits) for v in value) + "]"
    return _e(value)


def _figure(fig: Any, caption: str) -> str:
    data = base64.b64encode(plots.figure_png(fig)).decode("ascii")
    return (
        f'<figure><img alt="{_e(caption)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{_e(caption)}</figcaption></figure>"
    )


def _table(header: Sequence[str], rows: Sequence[Sequence[object]], left: int = 1) -> str:
    head = "".join(f'<th class="{"l" if i < left else ""}">{_e(h)}</th>' for i, h in enumerate(header))
    body = "".join(
        "<tr>" + "".join(
            f'<td class="{"l" if i < left else ""}">{c if isinstance(c, _Raw) else _fmt(c)}</td>'
            for i, c in enumerate(r)
        ) + "</tr>"
        for r in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


class _Raw(str):
    """Already-escaped HTML for a table cell."""


_NUMBER = re.compile(r"\d+(?:\.\d+)?")


def _flag_counts(series: pd.Series, *, group_numbers: bool = True) -> Counter[str]:
    """Rows per QA flag; flags that differ only by a number (``nearest_valid_12km``,
    ``nearest_valid_19km``) count together as ``nearest_valid_Nkm``."""
    counts: Counter[str] = Counter()
    for cell in series.fillna("").astype(str):
        for flag in {f.strip() for f in cell.split(";")}:
            if flag:
                counts[_NUMBER.sub("N", flag) if group_numbers else flag] += 1
    return counts


def _locate_section(table: pd.DataFrame) -> str:
    if "locate_status" not in table.columns:
        return "<p class='note'>The table carries no locate columns.</p>"
    status = table["locate_status"].fillna("").astype(str)
    rows = [(s, int((status == s).sum())) for s in ("ok", "flagged", "rejected")]
    out = "<p>Every input row is kept; rows that could not be located keep their place with a reason.</p>"
    out += _table(["status", "rows"], rows)
    counts = _flag_counts(table.get("locate_flags", pd.Series(dtype=str)))
    if counts:
        out += _table(["QA flag", "rows"], counts.most_common())
    rejected = table[status == "rejected"]
    if len(rejected) and "locate_notes" in table.columns:
        items = "".join(
            f"<li>row {int(i) + 1}: {_e(n)}</li>" for i, n in rejected["locate_notes"].head(30).items()
        )
        out += f"<details><summary>Why rows were rejected</summary><ul>{items}</ul></details>"
    return out


def _covariate_section(table: pd.DataFrame, name: str, units: str) -> str:
    values = pd.to_numeric(table[name], errors="coerce") if name in table else pd.Series(dtype=float)
    finite = int(np.isfinite(values.to_numpy(dtype=float)).sum())
    out = f"<h3>{_e(name)}</h3>"
    out += _table(
        ["", "rows"],
        [("with a value", finite), ("without a value", int(len(values) - finite))],
    )
    flags = _flag_counts(table.get(f"{name}_flags", pd.Series(dtype=str)))
    if flags:
        out += _table(["QA flag", "rows"], flags.most_common())
        out += _figure(plots.flag_bars(flags, title=f"QA flags of {name}"),
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
        out += _table(["", "median", "min", "max"], stats)
    out += _figure(plots.histogram(values.to_numpy(dtype=float), label=f"{name} ({units})" if units else name,
                                   title=f"Distribution of {name}"),
                   f"Distribution of the covariate {name} over rows with a value.")
    return out


def _model_section(fit: Any, level: float) -> tuple[str, dict[str, Any]]:
    d = fit.to_dict()
    rows = [
        (
            c["term"], c["estimate"], c["se"], c["statistic"], c["p"], c["ci_low"], c["ci_high"],
            c.get("df"),
        )
        for c in d["coefficients"]
    ]
    test = "t" if d.get("test") == "t" else "z"
    out = _table(
        ["term", "estimate", "std. error", test, "p", f"{level:.0%} low", f"{level:.0%} high", "df"],
        rows,
    )
    het = [
        ("method", _e(d.get("method")), ""),
        ("effects (k) / coefficients (p)", f"{d.get('k')} / {d.get('p')}", ""),
        ("tau²", d.get("tau2"), _Raw(_fmt(d.get("tau2_ci")))),
        ("I² (%)", d.get("I2"), ""),
        ("H²", d.get("H2"), ""),
        ("pseudo-R² (%)", d.get("R2"), ""),
        ("Q_E (residual heterogeneity)", d.get("Q_E"), _Raw(f"df {_fmt(d.get('Q_E_df'))}, p {_fmt(d.get('Q_E_p'))}")),
        ("Q_M (moderators)", d.get("Q_M"), _Raw(f"df {_fmt(d.get('Q_M_df'))}, p {_fmt(d.get('Q_M_p'))}")),
    ]
    for name, value in (d.get("variance_components") or {}).items():
        het.append((f"variance component: {name}", value, ""))
    out += _table(["heterogeneity", "value", "detail"], het)
    if d.get("warnings"):
        out += "<ul class='caution'>" + "".join(f"<li>{_e(w)}</li>" for w in d["warnings"]) + "</ul>"
    if not d.get("converged", True):
        out += "<p class='caution'>The fit did not converge; read the estimates with care.</p>"
    return out, d


def _get(obj: Any, *names: str) -> Any:
    for n in names:
        if isinstance(obj, Mapping) and n in obj:
            return obj[n]
        if hasattr(obj, n):
            return getattr(obj, n)
    return None


def _model_figures(
    fit: Any,
    d: Mapping[str, Any],
    used: pd.DataFrame,
    *,
    moderator: str | None,
    effect: str,
    variance: str,
    egger: Any,
    labels: Sequence[str],
) -> str:
    y = used[effect].to_numpy(dtype=float)
    v = used[variance].to_numpy(dtype=float)
    tau2 = float(d.get("tau2") or 0.0)
    out = ""
    coefs = d["coefficients"]
    if d.get("p") == 1:
        pooled, low, high = coefs[0]["estimate"], coefs[0]["ci_low"], coefs[0]["ci_high"]
        centre_note = "the pooled random-effects estimate"
    else:
        w = 1.0 / (v + tau2)
        pooled = float(np.sum(w * y) / np.sum(w))
        low = high = None
        centre_note = "the weighted mean effect (the model has moderators)"
    if moderator and moderator in used.columns and pd.api.types.is_numeric_dtype(used[moderator]):
        x = used[moderator].to_numpy(dtype=float)
        xs = np.linspace(np.nanmin(x), np.nanmax(x), 60)
        new = used.iloc[np.zeros(xs.size, dtype=int)].copy()
        for col in new.columns:
            if col != moderator and pd.api.types.is_numeric_dtype(used[col]):
                new[col] = float(used[col].mean())
        new[moderator] = xs
        try:
            pred = fit.predict(new.reset_index(drop=True))
            out += _figure(
                plots.bubble_plot(
                    x, y, 1.0 / (v + tau2), line_x=xs,
                    estimate=pred["estimate"].to_numpy(float), ci_low=pred["ci_low"].to_numpy(float),
                    ci_high=pred["ci_high"].to_numpy(float), pi_low=pred["pi_low"].to_numpy(float),
                    pi_high=pred["pi_high"].to_numpy(float), xlabel=moderator, ylabel=effect,
                ),
                f"Effect against {moderator}; bubble area proportional to the random-effects weight; "
                "other numeric moderators held at their means.",
            )
        except Exception as exc:  # noqa: BLE001 - a figure must not sink the report
            out += f"<p class='note'>No bubble plot: prediction failed ({_e(exc)}).</p>"
    out += _figure(
        plots.forest_plot(labels, y, v, pooled=pooled if low is not None else None,
                          pooled_low=low, pooled_high=high, xlabel=effect),
        "Each effect with its 95% confidence interval (from its sampling variance).",
    )
    e_int, e_slope = _get(egger, "intercept"), _get(egger, "slope")
    out += _figure(
        plots.funnel_plot(y, v, pooled=pooled, egger_intercept=e_int, egger_slope=e_slope, xlabel=effect),
        f"Funnel plot centred on {centre_note}."
        + (" The red line is Egger's regression; an intercept far from zero suggests "
           "small-study asymmetry." if e_int is not None else ""),
    )
    if egger is not None:
        p = _get(egger, "p", "p_value", "pvalue")
        out += f"<p>Egger's test: intercept {_fmt(e_int)}, p = {_fmt(p)}.</p>"
    try:
        fitted = fit.predict(used.reset_index(drop=True))["estimate"].to_numpy(float)
        resid, label = y - fitted, "raw residual"
        if hasattr(fit, "standardized_residuals"):
            sr = fit.standardized_residuals()
            if isinstance(sr, pd.DataFrame):  # one row per input row; dropped rows flagged
                if "dropped" in sr.columns:
                    sr = sr[~sr["dropped"].astype(bool)]
                sr = sr["z"] if "z" in sr.columns else sr.iloc[:, 0]
            sr = np.asarray(sr, dtype=float)
            if sr.shape == resid.shape:
                resid, label = sr, "standardised residual"
        out += _figure(plots.residual_plot(fitted, resid, ylabel=label),
                       f"{label.capitalize()}s against fitted values; a funnel or a curve "
                       "suggests a missing term or a wrong scale.")
    except Exception as exc:  # noqa: BLE001
        out += f"<p class='note'>No residual plot: {_e(exc)}.</p>"
    return out


def _cautions(windows_tried: int, permutation_p: float | None) -> str:
    items = [
        "Covariates read from grids are proxies: a grid cell averages conditions over tens of "
        "kilometres and a month or a day, not the conditions the animals met at the site.",
        "Reported coordinates and dates have their own precision (see site_precision_km and "
        "period_precision); a coarse coordinate or a season-long period blurs the match.",
        "Moderator associations across studies are observational: they show that effects "
        "differ with the covariate, not that the covariate caused the difference. Studies "
        "that differ in climate also differ in methods, hosts and years.",
        f"{windows_tried} covariate window(s) or statistic(s) were tried in this run. Trying many "
        "windows and keeping the best inflates false positives; report every one tried"
        + (f" (permutation-corrected p for the moderator: {_fmt(permutation_p)})."
           if permutation_p is not None else ", and prefer a permutation test."),
        "Sites on masked (land) cells were moved to the nearest valid cell only where the QA "
        "flags say so; check the distances above.",
    ]
    return "<div class='caution'><ul>" + "".join(f"<li>{_e(t)}</li>" for t in items) + "</ul></div>"


def render_report(
    *,
    table: pd.DataFrame,
    fit: Any = None,
    covariates: Sequence[str] = (),
    moderator: str | None = None,
    effect: str = "effect",
    variance: str = "variance",
    field: Any = None,
    provenance: Mapping[str, Any] | None = None,
    locate_summary: Mapping[str, Any] | None = None,
    windows_tried: int = 1,
    title: str = "envlink report",
    egger: Any = None,
    label: str | None = None,
    units: Mapping[str, str] | None = None,
    permutation_p: float | None = None,
    level: float = 0.95,
) -> str:
    """Return the report as one HTML string; see :func:`write_report` for the parameters."""
    from envlink import __version__

    units = dict(units or {})
    parts = [f"<h1>{_e(title)}</h1>",
             f"<p class='note'>Made by envlink {_e(__version__)} on "
             f"{_e(_dt.datetime.now(_dt.UTC).strftime('%Y-%m-%d %H:%M UTC'))}; "
             f"{len(table)} input rows.</p>"]
    parts.append("<h2>How far to trust this</h2>" + _cautions(windows_tried, permutation_p))
    parts.append("<h2>Locating sites and periods</h2>" + _locate_section(table))
    if locate_summary:
        parts.append(_table(["", "value"], list(locate_summary.items())))
    if {"site_lat", "site_lon"} <= set(table.columns):
        kw: dict[str, Any] = {}
        field_label = ""
        if field is not None and {"lat", "lon"} <= set(getattr(field, "dims", ())):
            mean = field.mean("time") if "time" in field.dims else field
            kw = dict(field_lat=np.asarray(field["lat"]), field_lon=np.asarray(field["lon"]),
                      field=np.asarray(mean, dtype=float))
            field_label = f"{field.name or 'field'} ({field.attrs.get('units', '')}), time mean"
        parts.append(_figure(
            plots.site_map(pd.to_numeric(table["site_lat"], errors="coerce").to_numpy(float),
                           pd.to_numeric(table["site_lon"], errors="coerce").to_numpy(float),
                           table.get("locate_status", pd.Series(["ok"] * len(table))).astype(str).tolist(),
                           field_label=field_label, **kw),
            "Located sites, coloured by locate status"
            + (f", over {field_label}." if field_label else "."),
        ))
    if covariates:
        parts.append("<h2>Covariates and extraction QA</h2>")
        for c in covariates:
            parts.append(_covariate_section(table, c, units.get(c, "")))
    if fit is not None:
        parts.append("<h2>Meta-regression</h2>")
        section, d = _model_section(fit, level)
        parts.append(section)
        need = [effect, variance] + ([moderator] if moderator and moderator in table.columns else [])
        used = table.copy()
        for col in need:
            used[col] = pd.to_numeric(used[col], errors="coerce")
        mask = np.logical_and.reduce([np.isfinite(used[c].to_numpy(float)) for c in need])
        mask &= used[variance].to_numpy(float) > 0
        used = used[mask]
        if len(used) == d.get("k"):
            labels = (used[label].astype(str).tolist() if label and label in used.columns
                      else [f"row {i + 1}" for i in used.index])
            parts.append("<h2>Model figures</h2>")
            parts.append(_model_figures(fit, d, used, moderator=moderator, effect=effect,
                                        variance=variance, egger=egger, labels=labels))
        else:
            parts.append(f"<p class='note'>Model figures skipped: {len(used)} complete rows here "
                         f"but the model used k = {_e(d.get('k'))}.</p>")
    if provenance:
        text = json.dumps(provenance, indent=2, default=str, sort_keys=True)
        parts.append(f"<h2>Provenance</h2><details><summary>grids, windows, rules, software versions"
                     f"</summary><pre>{_e(text)}</pre></details>")
    body = "\n".join(parts)
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<meta name='viewport' content='width=device-width,initial-scale=1'><title>{_e(title)}</title>"
        f"<style>{_CSS}</style><script>{_SELF_CHECK}</script></head><body>{body}</body></html>"
    )


def write_report(path: str | os.PathLike[str], **options: Any) -> Path:
    """Write the self-contained HTML report atomically.

    Parameters
    ----------
    path : path-like
        The ``.html`` file to write (replaced atomically).
    table : pandas.DataFrame
        The enriched table (locate, covariate and effect columns).
    fit : fitted meta-regression, optional
        Any object with ``to_dict()`` (the JSON contract), ``predict(DataFrame)``
        returning ``estimate, ci_low, ci_high, pi_low, pi_high`` and, optionally,
        ``standardized_residuals()``.
    covariates : sequence of str
        Covariate columns to describe (with their ``_flags``, ``_distance_km`` and
        ``_coverage`` columns).
    moderator : str, optional
        Numeric column for the bubble plot.
    effect, variance : str
        Effect and sampling-variance columns.
    field : xarray.DataArray, optional
        A normalised grid drawn (time mean) under the site map.
    provenance : mapping, optional
        Shown as JSON.
    windows_tried : int
        How many covariate windows / statistics were tried, for the cautions.
    egger : object or mapping, optional
        Egger's test result with ``intercept``, ``slope`` and ``p``.
    label : str, optional
        Column labelling rows in the forest plot.
    units : mapping, optional
        Units per covariate for axis labels.
    permutation_p : float, optional
        Permutation-corrected p for the moderator, quoted in the cautions.
    title : str
        Page title.

    Returns
    -------
    pathlib.Path
    """
    p = Path(path)
    text = render_report(**options)
    with atomic_path(p) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return p
