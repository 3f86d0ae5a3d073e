"""The report's sections on honest inference: what was corrected, and how, in plain words.

:func:`multiple_testing_caution` is the caution about trying many windows: it quotes
the family-wise p of a scan when one ran, or says what a per-model permutation p
does and does not correct. :func:`inference_sections` renders the results of the
checks (permutation p per term and of Q_M, the window scan with its heatmap and
its null maxima, the pooled fit over imputed dates, the small-study checks with a
residual funnel, Moran's I with a correlogram, a spatial random effect, shared grid
cells). Both read the result objects duck-typed (their ``lines()``, ``table`` ...),
so this module imports no other stage.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from envlink.report import scanplots
from envlink.report.sections import esc as _e
from envlink.report.sections import figure_html as _figure
from envlink.report.sections import table_html as _table

__all__ = ["multiple_testing_caution", "inference_sections"]


def _lines(lines: Sequence[str]) -> str:
    return "<ul>" + "".join(f"<li>{_e(t.strip())}</li>" for t in lines if t.strip()) + "</ul>"


def multiple_testing_caution(inference: Any, windows_tried: int) -> str:
    """The caution sentence about windows tried and what any p-value corrects."""
    scan = getattr(inference, "scan", None)
    perm = getattr(inference, "permutation", None)
    text = (f"{windows_tried} covariate window(s) or statistic(s) were attached in this run. "
            "Trying many windows and keeping the best inflates false positives.")
    if scan is not None:
        fam = "not computed" if scan.family_p is None else f"{scan.family_p:.4g}"
        return (text + f" The window scan tried {scan.n_windows} windows: family-wise p over "
                f"{scan.n_windows} windows = {fam} (best window {scan.best}). Only this p "
                "supports a claim that some window is associated with the effects; the best "
                "window's slope is biased away from zero.")
    if perm is not None:
        terms = "; ".join(f"permutation p for {r.term} (this model) = {r.p:.4g}"
                          for r in perm.terms.itertuples(index=False))
        return (text + f" {terms}; omnibus permutation p of Q_M (this model) = {perm.Q_M_p:.4g}. "
                "These correct for this one model only, not for the windows or statistics tried; "
                "a window scan ([scan]) gives a family-wise p.")
    return text + " Report every window tried, and prefer a window scan with its family-wise p."


def _scan_section(scan: Any) -> str:
    t = scan.table
    order = np.argsort(-np.abs(t["statistic"].to_numpy(dtype=np.float64)))[:10]
    desc = [c for c in ("stat", "anchor", "lag", "span", "unit") if c in t.columns]
    rows = [[str(t.index[i]), *[t.iloc[i][c] for c in desc], t.iloc[i]["k"],
             t.iloc[i]["slope"], t.iloc[i]["se"], t.iloc[i]["statistic"], t.iloc[i]["p"],
             t.iloc[i]["delta_aic"], t.iloc[i]["p_family"]] for i in order]
    out = "<h3>Window scan</h3>" + _lines(scan.lines())
    out += _table(["window", *desc, "k", "slope", "SE", scan.statistic_kind.strip("|"),
                   "per-window p", "ΔAIC (ML)", "family-wise p"], rows)
    if {"lag", "span"} <= set(t.columns):
        try:
            out += _figure(scanplots.scan_heatmap(scan), "Each window's statistic by lag and span; "
                           "the best window boxed.")
        except Exception as exc:  # noqa: BLE001 - a figure must not stop the report
            out += f"<p class='note'>No heatmap: {_e(exc)}.</p>"
    if len(scan.maxima):
        out += _figure(scanplots.null_maxima(scan), "The largest statistic over the family in each "
                       "permutation, and the observed one.")
    return out


def _imputation_section(imp: Any) -> str:
    t = imp.pooled.table
    rows = [[r.term, r.estimate, r.se, r.df, r.p, r.se_growth, r.fmi] for r in t.itertuples()]
    return ("<h3>Imprecise dates</h3>" + _lines(imp.lines()[:1] + imp.notes)
            + _table(["term", "pooled estimate", "total SE", "df (Barnard-Rubin)", "p",
                      "SE growth (×)", "fraction of missing information"], rows))


def _checks_section(inference: Any) -> str:
    out = ""
    bias = getattr(inference, "bias", None)
    if bias is not None:
        out += "<h3>Small-study checks</h3>" + _lines(bias.lines())
        if len(bias.residual):  # envlink report fills them from its refitted model
            out += _figure(scanplots.residual_funnel(bias.residual, bias.residual_se,
                                                     label=f"Residual funnel ({bias.model})"),
                           "Residuals of the fitted model against their sampling SE.")
    moran = getattr(inference, "moran", None)
    if moran is not None:
        out += "<h3>Spatial dependence</h3>" + _lines([moran.line(), *moran.notes])
    cor = getattr(inference, "correlogram", None)
    if cor is not None:
        out += _figure(scanplots.correlogram_plot(cor), "Moran's I of the residuals by distance "
                       "band (bands hold equal numbers of site pairs).")
    sp = getattr(inference, "spatial_effect", None)
    if sp is not None:
        out += _lines(sp.lines())
    shared = [s for s in getattr(inference, "shared", []) if s.cells_shared]
    if shared:
        out += _lines([f"{s.sites_sharing} sites took {s.covariate} from {s.cells_shared} shared "
                       f"grid cell(s) ({s.rows_sharing} rows, flagged shared_grid_cell): their "
                       "covariate values are not independent." for s in shared])
    return out


def inference_sections(inference: Any) -> str:
    """HTML of every check that ran (empty when none did)."""
    if inference is None:
        return ""
    out = ""
    perm = getattr(inference, "permutation", None)
    if perm is not None:
        out += "<h3>Permutation tests of this model</h3>" + _lines(perm.lines())
    if getattr(inference, "scan", None) is not None:
        out += _scan_section(inference.scan)
    if getattr(inference, "imputation", None) is not None:
        out += _imputation_section(inference.imputation)
    out += _checks_section(inference)
    return "<h2>What was corrected, and how</h2>" + out if out else ""
