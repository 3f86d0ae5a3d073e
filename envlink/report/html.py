"""The self-contained HTML report: what was done, how well, what the model says, how far to trust it.

Every figure is a PNG embedded as a data URI, so the report is one file that can be
mailed or archived. Every string that came from the user (column names, site names,
flags, formulas, provenance) is HTML-escaped.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.util import atomic_path
from envlink.core.versions import VERSION
from envlink.report import plots
from envlink.report.figures import model_figures
from envlink.report.inference_html import inference_sections, multiple_testing_caution
from envlink.report.sections import (
    Raw,
    cautions,
    covariate_section,
    esc,
    figure_html,
    fmt,
    locate_section,
    table_html,
)

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


def _model_section(d: Mapping[str, Any]) -> str:
    """The fit's tables, read from its JSON layout (docs/methods.md, "Result fields")."""
    mod, het, mt, co = d["model"], d["heterogeneity"], d["moderator_test"], d["coefficients"]
    level = mod["confidence_level"]
    t = co["test"] == "t"
    perm = any("permutation_p" in c for c in co["table"])  # a permutation test ran
    rows = [[c["term"], c["estimate"], c["se"], c["statistic"], c["p"], c["ci_low"], c["ci_high"]]
            + ([Raw(_df(c.get("df")))] if t else []) + ([c.get("permutation_p")] if perm else [])
            for c in co["table"]]
    header = ["term", "estimate", "std. error", co["test"], "p", f"{level:.0%} low", f"{level:.0%} high"]
    header += (["df"] if t else []) + (["permutation p (this model)"] if perm else [])
    out = f"<p>{esc(co['test_words'])}.</p>" + table_html(header, rows)
    ti, rt = het["tau2_interval"], het["residual_test"]
    about = [
        ("tau² estimator", Raw(esc(f"{mod['tau2_method']} ({mod['tau2_method_words']})")), ""),
        ("effects used / coefficients", Raw(f"{mod['effects_used']} / {mod['coefficient_count']}"), ""),
        ("tau²", het["tau2"], Raw(f"{level:.0%} {esc(ti['method'])} interval {fmt(ti['low'])} to "
                                  f"{fmt(ti['high'])}" if ti["low"] is not None else "")),
        ("I² (%)", het["I2_percent"], ""),
        ("H²", het["H2"], ""),
        ("R² (% of tau² explained)", het["R2_percent"], ""),
        ("Q_E (residual heterogeneity)", rt["Q_E"], Raw(f"{_df(rt['df'])} df, p {fmt(rt['p'])}")),
    ]
    if mt["Q_M"] is not None:
        dfs = _df(mt["df"]) + (f" and {_df(mt['df_denominator'])}" if mt["df_denominator"] else "")
        about.append((f"Q_M (moderator test, {'chi²' if mt['distribution'] == 'chi2' else 'F'})",
                      mt["Q_M"], Raw(f"{dfs} df, p {fmt(mt['p'])}")))
    for name, value in (d.get("variance_components") or {}).items():
        about.append((f"variance component: {name}", value, ""))
    out += table_html(["the model", "value", "detail"], about)
    if d.get("warnings"):
        out += "<ul class='caution'>" + "".join(f"<li>{esc(w)}</li>" for w in d["warnings"]) + "</ul>"
    if not mod["converged"]:
        out += "<p class='caution'>The fit did not converge; read the estimates with care.</p>"
    return out


def _df(x: Any) -> str:
    if x is None:
        return "—"
    return str(int(round(x))) if abs(float(x) - round(float(x))) < 1e-9 else f"{float(x):.1f}"


def _figures_html(table: pd.DataFrame, fit: Any, egger: Any, options: Mapping[str, Any]) -> str:
    items = model_figures(table, fit, egger=egger, **options)
    if len(items) == 1 and items[0].figure is None:
        return f"<p class='note'>{esc(items[0].caption)}</p>"
    out = "<h2>Model figures</h2>"
    for item in items:
        out += (figure_html(item.figure, item.caption) if item.figure is not None
                else f"<p class='note'>{esc(item.caption)}</p>")
    if egger is not None:
        out += (f"<p>Egger's test: intercept {fmt(_get(egger, 'intercept'))}, "
                f"p = {fmt(_get(egger, 'p', 'p_value', 'pvalue'))}.</p>")
    return out


def _get(obj: Any, *names: str) -> Any:
    for n in names:
        if isinstance(obj, Mapping) and n in obj:
            return obj[n]
        if hasattr(obj, n):
            return getattr(obj, n)
    return None


def _site_map(table: pd.DataFrame, field: Any) -> str:
    kw: dict[str, Any] = {}
    field_label = ""
    if field is not None and {"lat", "lon"} <= set(getattr(field, "dims", ())):
        mean = field.mean("time") if "time" in field.dims else field
        kw = dict(field_lat=np.asarray(field["lat"]), field_lon=np.asarray(field["lon"]),
                  field=np.asarray(mean, dtype=float))
        field_label = f"{field.name or 'field'} ({field.attrs.get('units', '')}), time mean"
    status = table.get("locate_status", pd.Series(["ok"] * len(table))).astype(str).tolist()
    return figure_html(
        plots.site_map(pd.to_numeric(table["site_lat"], errors="coerce").to_numpy(float),
                       pd.to_numeric(table["site_lon"], errors="coerce").to_numpy(float),
                       status, field_label=field_label, **kw),
        "Located sites, coloured by locate status" + (f", over {field_label}." if field_label else "."),
    )


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
    inference: Any = None,
    forest_order: str = "effect",
    prediction: str = "tests",
) -> str:
    """Return the report as one HTML string; see :func:`write_report` for the parameters."""
    units = dict(units or {})
    parts = [f"<h1>{esc(title)}</h1>",
             f"<p class='note'>Made by envlink {esc(VERSION)} on "
             f"{esc(_dt.datetime.now(_dt.UTC).strftime('%Y-%m-%d %H:%M UTC'))}; "
             f"{len(table)} input rows.</p>"]
    parts.append("<h2>How far to trust this</h2>" + cautions(multiple_testing_caution(inference, windows_tried)))
    parts.append("<h2>Locating sites and periods</h2>" + locate_section(table))
    if locate_summary:
        parts.append(table_html(["", "value"], list(locate_summary.items())))
    if {"site_lat", "site_lon"} <= set(table.columns):
        parts.append(_site_map(table, field))
    if covariates:
        parts.append("<h2>Covariates and extraction QA</h2>")
        parts += [covariate_section(table, c, units.get(c, "")) for c in covariates]
    if fit is not None:
        d = fit.to_dict()
        if hasattr(inference, "add_to"):  # the checks in their sections (envlink.metareg.checks)
            d = inference.add_to(d)
        parts.append("<h2>Meta-regression</h2>" + _model_section(d))
        parts.append(_figures_html(table, fit, egger, {
            "effect": effect, "variance": variance, "moderator": moderator, "label": label,
            "forest_order": forest_order, "prediction": prediction}))
    parts.append(inference_sections(inference))  # envlink.report.inference_html
    if provenance:
        text = json.dumps(provenance, indent=2, default=str, sort_keys=True)
        parts.append(f"<h2>Provenance</h2><details><summary>grids, windows, rules, software versions"
                     f"</summary><pre>{esc(text)}</pre></details>")
    body = "\n".join(parts)
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<meta name='viewport' content='width=device-width,initial-scale=1'><title>{esc(title)}</title>"
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
        Any object with ``to_dict()`` (the JSON layout of docs/methods.md, "Result
        fields"), ``predict(DataFrame, prediction=...)`` returning ``estimate,
        ci_low, ci_high, pi_low, pi_high`` and, optionally,
        ``standardized_residuals()``. The rows it used are read from the table's
        ``fit_included`` column (written by the project run), else from the fit's
        ``included_`` when it was fitted to this table; without either, the model
        figures are skipped with a note. Intervals and captions use the fit's
        confidence level.
    covariates : sequence of str
        Covariate columns to describe (with their ``_flags``, ``_distance_km`` and
        ``_coverage`` columns).
    moderator : str, optional
        Numeric column for the bubble plot; default the first numeric term of the
        model in formula order (the caption says which). A model with categorical
        moderators only has no bubble plot; the other figures still appear.
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
        Column labelling rows in the forest plot (a study, site or year).
    forest_order : str, default "effect"
        Row order of the forest plot, a name of
        :data:`~envlink.report.figures.FOREST_ORDERS`.
    prediction : str, default "tests"
        The prediction interval's rule (``fit.predict(prediction=...)``).
    units : mapping, optional
        Units per covariate for axis labels.
    inference : object, optional
        The checks run on the fit (:class:`envlink.metareg.checks.Checks`): the cautions
        quote their p-values, the coefficient table shows each term's permutation p,
        and the section "What was corrected, and how" shows every check.
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
