"""The result of a fitted meta-regression: its JSON layout and its printed / HTML summary.

The layout is envlink's own, in sections: ``model`` (the model and its data),
``heterogeneity``, ``moderator_test``, ``coefficients``, ``variance_components``,
``diagnostics`` and ``warnings``, with a ``format_version``. docs/methods.md ("Result
fields") describes every key; :data:`FORMAT_VERSION` changes with the layout (the
major number when a key moves or goes, the minor number when one is added).
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping, Sequence
from typing import Any

from envlink.metareg.formula import INTERCEPT
from envlink.metareg.vocabulary import ESTIMATORS, PREDICTION_INTERVALS, TESTS

__all__ = ["FORMAT_VERSION", "FitSummary", "result_dict", "pooled_interval"]

#: Version of the JSON layout written by ``to_dict()`` and ``envlink fit --json``.
FORMAT_VERSION = "2.0"

_COEF_KEYS = ("estimate", "se", "statistic", "p", "ci_low", "ci_high")


def _method_words(label: str) -> str:
    """An estimator's label in words (``'fixed'``: tau² given by the user)."""
    if label in ESTIMATORS:
        return str(ESTIMATORS[label].info.get("words", label))
    return "tau² fixed by the user" if label == "fixed" else label


def _num(x: Any) -> float | None:
    """JSON-safe float: None for missing or non-finite values."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _column(value: Any) -> str | None:
    """A grouping option as the JSON records it: its column name, or ``"labels"`` for arrays."""
    return None if value is None else value if isinstance(value, str) else "labels"


def _test_words(m: Any) -> str:
    if getattr(m, "cluster", None) is not None:
        return "CR2 cluster-robust t tests with Satterthwaite df"
    entry = TESTS.parse(m.test).entry
    return str(entry.info.get("words", entry.name)) + (" t tests" if m.test_ == "t" else " tests")


def pooled_interval(m: Any, rule: str = "tests") -> dict[str, Any] | None:
    """The prediction interval of the pooled effect (a model without moderators), else None.

    ``rule`` names an entry of :data:`~envlink.metareg.vocabulary.PREDICTION_INTERVALS`.
    """
    if m.p_ != 1 or not m.design_.intercept:
        return None
    name = PREDICTION_INTERVALS.parse(rule).entry.name
    row = m.predict(prediction=name).iloc[0]
    df = PREDICTION_INTERVALS[name].info["df"](m.k_, m.p_, m.df_)
    return {"estimate": _num(row["estimate"]), "low": _num(row["pi_low"]),
            "high": _num(row["pi_high"]), "rule": name, "df": _num(df)}


def result_dict(m: Any) -> dict[str, Any]:
    """The JSON result of a fitted model (JSON-safe; missing -> None); reads only public attributes."""
    low, high = m.tau2_ci_
    rows, undefined = [], []
    for row in m.coefficients_.itertuples(index=False):
        item: dict[str, Any] = {"term": row.term}
        for key in _COEF_KEYS + (("df",) if m.test_ == "t" else ()):
            item[key] = _num(getattr(row, key))
            if item[key] is None:
                undefined.append(f"{row.term}.{key}")
        rows.append(item)
    notes = list(m.notes_)
    if undefined:
        notes.append("Undefined values are null: " + ", ".join(undefined) + " (e.g. too few "
                     "clusters or a degenerate design for the requested test).")
    has_mods = m.Q_M_ is not None
    clustered = getattr(m, "cluster", None) is not None
    return {
        "format_version": FORMAT_VERSION,
        "model": {
            "tau2_method": m.method_, "tau2_method_words": _method_words(m.method_),
            "effects_used": int(m.k_), "rows_left_out": int(m.n_dropped_),
            "coefficient_count": int(m.p_), "moderators": getattr(m, "moderators", None),
            "nested": _column(getattr(m, "nested", None)),
            "cluster": _column(getattr(m, "cluster", None)),
            "cluster_count": int(m.n_clusters_) if clustered else None,
            "confidence_level": float(m.level), "converged": bool(m.converged_),
            "iterations": int(m.n_iter_),
        },
        "heterogeneity": {
            "tau2": _num(m.tau2_),
            "tau2_interval": {"low": _num(low), "high": _num(high), "method": "Q-profile"},
            "I2_percent": _num(m.I2_), "H2": _num(m.H2_), "R2_percent": _num(m.R2_),
            "residual_test": {"Q_E": _num(m.Q_E_), "df": int(m.Q_E_df_), "p": _num(m.Q_E_p_)},
            "pooled_prediction_interval": pooled_interval(m),
        },
        "moderator_test": {
            "Q_M": _num(m.Q_M_), "distribution": ("chi2" if m.test_ == "z" else "F") if has_mods else None,
            "df": int(m.Q_M_df_), "df_denominator": _num(m.df_) if has_mods and m.test_ == "t" else None,
            "p": _num(m.Q_M_p_),
        },
        "coefficients": {"test": m.test_, "test_words": _test_words(m), "df": _num(m.df_),
                         "table": rows},
        "variance_components": {k: _num(v) for k, v in m.variance_components_.items()},
        "diagnostics": {},
        "warnings": notes,
    }


# --------------------------------------------------------------------- text
def _f(x: Any, nd: int = 4) -> str:
    if x is None:
        return "-"
    if isinstance(x, int):
        return str(x)
    ax = abs(x)
    if ax != 0 and (ax < 1e-4 or ax >= 1e6):
        return f"{x:.{nd}e}"
    return f"{x:.{nd}f}"


def _df(x: Any) -> str:
    """Degrees of freedom: whole numbers as integers, Satterthwaite df with one decimal."""
    if x is None:
        return "-"
    return str(int(round(x))) if abs(x - round(x)) < 1e-9 else f"{x:.1f}"


def _p(x: float | None) -> str:
    """``p = 0.0123``, ``p = 3.1e-05`` or ``p < 1e-16``."""
    if x is None:
        return "p = -"
    return "p < 1e-16" if x < 1e-16 else f"p = {x:.2e}" if x < 1e-4 else f"p = {x:.4f}"


def _plain_p(x: float | None) -> str:
    return _p(x).removeprefix("p = ").replace("p < ", "< ")


def _estimation(r: dict[str, Any]) -> str:
    mod = r["model"]
    if mod["tau2_method"] == "fixed":
        return "tau² fixed by the user (no estimation)"
    head = f"{mod['tau2_method']} ({mod['tau2_method_words']})"
    if not mod["converged"]:
        return f"{head}, NOT converged after {mod['iterations']} iterations"
    if mod["iterations"] == 0:
        return f"{head}, closed form"
    return f"{head}, converged in {mod['iterations']} iteration" + ("s" if mod["iterations"] > 1 else "")


def _sections(r: dict[str, Any]) -> list[tuple[str, list[tuple[str, str]]]]:
    mod, het, mt, co = r["model"], r["heterogeneity"], r["moderator_test"], r["coefficients"]
    level = round(100 * mod["confidence_level"])
    terms = [c["term"] for c in co["table"] if c["term"] != INTERCEPT]
    data = [("effects used", f"{mod['effects_used']}"
             + (f" ({mod['rows_left_out']} rows left out)" if mod["rows_left_out"] else "")),
            ("moderators", mod["moderators"] or ", ".join(terms) or "none (the pooled effect)"),
            ("coefficients", str(mod["coefficient_count"])),
            ("tau² estimation", _estimation(r))]
    if mod["nested"]:
        data.append(("effects nested in", str(mod["nested"])))
    ti = het["tau2_interval"]
    tau = _f(het["tau2"]) + (f"   {level} % {ti['method']} interval {_f(ti['low'])} to {_f(ti['high'])}"
                             if ti["low"] is not None else "")
    rt = het["residual_test"]
    heter = [("tau²", tau), ("I²", f"{_f(het['I2_percent'], 2)} %"), ("H²", _f(het["H2"], 3)),
             ("R² (tau² explained)", "-" if het["R2_percent"] is None else f"{_f(het['R2_percent'], 2)} %"),
             ("residual Q_E", f"{_f(rt['Q_E'])} with {rt['df']} df, {_p(rt['p'])}")]
    pi = het["pooled_prediction_interval"]
    if pi is not None:
        heter.append((f"{level} % prediction interval", f"{_f(pi['low'])} to {_f(pi['high'])}"))
    for name, val in r["variance_components"].items():
        heter.append((f"component {name}", _f(val)))
    if mt["Q_M"] is None:
        mods = [("Q_M", "no moderators to test")]
    elif mt["distribution"] == "chi2":
        mods = [("Q_M", f"chi² = {_f(mt['Q_M'])} with {mt['df']} df, {_p(mt['p'])}")]
    else:
        mods = [("Q_M", f"F = {_f(mt['Q_M'])} with {mt['df']} and {_df(mt['df_denominator'])} df, "
                        f"{_p(mt['p'])}")]
    tests = co["test_words"] + (f", {_df(co['df'])} df" if co["df"] is not None and not mod["cluster"] else "")
    if mod["cluster"]:
        tests += f" ({mod['cluster_count']} clusters of {mod['cluster']})"
    return [("The model and its data", data), ("Heterogeneity", heter),
            ("Moderator test", mods), ("Coefficients", [("tests", tests)])]


def _coef_table(r: dict[str, Any]) -> list[list[str]]:
    """The coefficient table; a ``perm. p`` column when a permutation test ran."""
    co = r["coefficients"]
    level = round(100 * r["model"]["confidence_level"])
    t = co["test"] == "t"
    perm = any("permutation_p" in c for c in co["table"])
    header = ["term", "estimate", "std. error", co["test"], "p", f"{level}% low", f"{level}% high"]
    rows = [header + (["df"] if t else []) + (["perm. p"] if perm else [])]
    for c in co["table"]:
        row = [c["term"], _f(c["estimate"]), _f(c["se"]), _f(c["statistic"], 3), _plain_p(c["p"]),
               _f(c["ci_low"]), _f(c["ci_high"])]
        row += [_df(c.get("df"))] if t else []
        row += ["-" if c.get("permutation_p") is None else f"{c['permutation_p']:.4g}"] if perm else []
        rows.append(row)
    return rows


class FitSummary:
    """A fitted model's results: ``str()`` gives a text report, notebooks show HTML.

    Built from the JSON result (:func:`result_dict`), so the text, the HTML and the
    JSON always agree. ``extra`` maps a section's title to more sentences for it (the
    checks of :mod:`envlink.metareg.checks`): appended to a section of the fit, or shown
    as a section of its own after the coefficients.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9], "variance": [0.04, 0.05, 0.03, 0.06]})
    >>> s = MetaRegression(method="DL").fit(df).summary()
    >>> "Heterogeneity" in str(s) and "closed form" in str(s) and "<table" in s._repr_html_()
    True
    """

    def __init__(self, result: dict[str, Any], model: Any = None, *,
                 extra: Mapping[str, Sequence[str]] | None = None) -> None:
        self.result = result
        self.model = model
        self.extra = dict(extra or {})

    def _own_sections(self) -> list[tuple[str, Sequence[str]]]:
        """The extra sections that are not sections of the fit, in their order."""
        titles = {title for title, _ in _sections(self.result)}
        return [(t, lines) for t, lines in self.extra.items() if t not in titles and lines]

    def __str__(self) -> str:
        r = self.result
        out = ["envlink meta-regression", "=" * 23]
        for title, items in _sections(r):
            out += ["", title]
            width = max(len(a) for a, _ in items)
            out += [f"  {a.ljust(width)}  {b}" for a, b in items]
            out += [f"  {line}" for line in self.extra.get(title, ())]
        table = _coef_table(r)
        widths = [max(len(row[j]) for row in table) for j in range(len(table[0]))]
        fmt = lambda row: "  " + "  ".join(  # noqa: E731
            c.ljust(w) if j == 0 else c.rjust(w) for j, (c, w) in enumerate(zip(row, widths, strict=True)))
        out += ["", fmt(table[0]), "  " + "-" * (len(fmt(table[0])) - 2)]
        out += [fmt(row) for row in table[1:]]
        for title, lines in self._own_sections():
            out += ["", title] + [f"  {line}" for line in lines]
        if r["warnings"]:
            out += ["", "Notes"] + [f"  - {w}" for w in r["warnings"]]
        return "\n".join(out)

    __repr__ = __str__

    def _repr_html_(self) -> str:
        e = html.escape
        r = self.result
        parts = ["<div class='envlink-fit'><h4>envlink meta-regression</h4>"]
        for title, items in _sections(r):
            parts.append(f"<table><caption style='text-align:left'><b>{e(title)}</b></caption>")
            parts += [f"<tr><th style='text-align:left'>{e(a)}</th><td>{e(b)}</td></tr>" for a, b in items]
            parts.append("</table>")
            parts += [f"<p>{e(line.strip())}</p>" for line in self.extra.get(title, ())]
        table = _coef_table(r)
        parts.append("<table><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in table[0])
                     + "</tr></thead><tbody>")
        for row in table[1:]:
            parts.append("<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>")
        parts.append("</tbody></table>")
        for title, lines in self._own_sections():
            parts.append(f"<p><b>{e(title)}</b></p>" + "".join(f"<p>{e(t.strip())}</p>" for t in lines))
        parts.append("<ul>")
        parts += [f"<li>{e(n)}</li>" for n in r["warnings"]]
        parts.append("</ul></div>")
        return "".join(parts)
