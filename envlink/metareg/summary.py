"""The printed and HTML summary of a fitted meta-regression (our own layout)."""

from __future__ import annotations

import html
import math
from typing import Any

__all__ = ["FitSummary", "result_dict"]

_METHOD_WORDS = {
    "REML": "restricted maximum likelihood", "ML": "maximum likelihood",
    "DL": "DerSimonian-Laird", "PM": "Paule-Mandel", "HE": "Hedges", "SJ": "Sidik-Jonkman",
    "fixed": "tau² fixed by the user",
}


def _f(x: Any, nd: int = 4) -> str:
    if x is None:
        return "-"
    if isinstance(x, int):
        return str(x)
    ax = abs(x)
    if ax != 0 and (ax < 1e-4 or ax >= 1e6):
        return f"{x:.{nd}e}"
    return f"{x:.{nd}f}"


def _p(x: float | None) -> str:
    if x is None:
        return "-"
    return "<1e-16" if x < 1e-16 else (f"{x:.2e}" if x < 1e-4 else f"{x:.4f}")


def _num(x: Any) -> float | None:
    """JSON-safe float: None for missing or non-finite values."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def result_dict(m: Any) -> dict[str, Any]:
    """The JSON contract of DESIGN.md §4 for a fitted model (JSON-safe; missing -> None)."""
    ci = m.tau2_ci_
    r2 = m.R2_
    coefs = []
    undefined = []
    for row in m.coefficients_.itertuples(index=False):
        item = {"term": row.term}
        for key in ("estimate", "se", "statistic", "p", "ci_low", "ci_high") + (
                ("df",) if m.test_ == "t" else ()):
            item[key] = _num(getattr(row, key))
            if item[key] is None:
                undefined.append(f"{row.term}.{key}")
        coefs.append(item)
    notes = list(m.warnings_)
    if undefined:
        notes.append("Undefined values are null: " + ", ".join(undefined) + " (e.g. too few "
                     "clusters or a degenerate design for the requested test).")
    return {
        "method": m.method_, "k": int(m.k_), "p": int(m.p_),
        "tau2": _num(m.tau2_), "tau2_ci": [_num(ci[0]), _num(ci[1])],
        "I2": _num(m.I2_), "H2": _num(m.H2_), "R2": _num(r2),
        "Q_E": _num(m.Q_E_), "Q_E_df": int(m.Q_E_df_), "Q_E_p": _num(m.Q_E_p_),
        "Q_M": _num(m.Q_M_), "Q_M_df": int(m.Q_M_df_), "Q_M_p": _num(m.Q_M_p_),
        "test": m.test_, "df": _num(m.df_), "coefficients": coefs,
        "variance_components": {k: _num(v) for k, v in m.variance_components_.items()},
        "converged": bool(m.converged_), "iterations": int(m.n_iter_),
        "warnings": notes,
    }


class FitSummary:
    """A fitted model's results: ``str()`` gives a text report, notebooks show HTML.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9], "variance": [0.04, 0.05, 0.03, 0.06]})
    >>> s = MetaRegression(method="DL").fit(df).summary()
    >>> "Residual heterogeneity" in str(s) and "<table" in s._repr_html_()
    True
    """

    def __init__(self, result: dict[str, Any], model: Any = None) -> None:
        self.result = result
        self.model = model

    def _blocks(self) -> tuple[list[tuple[str, str]], list[list[str]], list[str]]:
        r = self.result
        lo, hi = r["tau2_ci"]
        ci = f"[{_f(lo)}, {_f(hi)}]" if lo is not None else "-"
        lines = [
            ("Effects (k) / coefficients (p)", f"{r['k']} / {r['p']}"),
            ("tau² estimator", f"{r['method']} ({_METHOD_WORDS.get(r['method'], r['method'])})"),
            ("tau² [Q-profile CI]", f"{_f(r['tau2'])} {ci}"),
        ]
        for name, val in r["variance_components"].items():
            lines.append((f"  component {name}", _f(val)))
        lines += [
            ("I² (%) / H²", f"{_f(r['I2'], 2)} / {_f(r['H2'], 3)}"),
            ("R² (%, heterogeneity explained)", _f(r["R2"], 2)),
            ("Residual heterogeneity Q_E", f"{_f(r['Q_E'])} on {r['Q_E_df']} df, p = {_p(r['Q_E_p'])}"),
        ]
        if r["Q_M"] is not None:
            kind = "chi²" if r["test"] == "z" else "F"
            den = "" if r["test"] == "z" else f", {_f(r['df'], 1)}"
            lines.append((f"Moderators Q_M ({kind})",
                          f"{_f(r['Q_M'])} on ({r['Q_M_df']}{den}) df, p = {_p(r['Q_M_p'])}"))
        tname = "z" if r["test"] == "z" else "t"
        m = self.model
        if tname == "z":
            kind = "normal (z)"
        elif m is not None and getattr(m, "cluster", None) is not None:
            kind = (f"t, CR2 cluster-robust ({m.n_clusters_} clusters), Satterthwaite df per "
                    "coefficient")
        else:
            kind = f"t (Knapp-Hartung, {_f(r['df'], 0)} df)"
        lines.append(("Tests", kind))
        header = ["term", "estimate", "se", tname, "p", "ci_low", "ci_high"]
        if tname == "t":
            header.append("df")
        rows = []
        for c in r["coefficients"]:
            row = [c["term"], _f(c["estimate"]), _f(c["se"]), _f(c["statistic"], 3), _p(c["p"]),
                   _f(c["ci_low"]), _f(c["ci_high"])]
            if tname == "t":
                row.append(_f(c.get("df"), 1))
            rows.append(row)
        notes = [f"converged: {'yes' if r['converged'] else 'NO'} after {r['iterations']} iteration(s)"]
        notes += [f"note: {w}" for w in r["warnings"]]
        return lines, [header, *rows], notes

    def __str__(self) -> str:
        lines, table, notes = self._blocks()
        width = max(len(a) for a, _ in lines)
        out = ["Mixed-effects meta-regression", "=" * 30]
        out += [f"{a.ljust(width)}  {b}" for a, b in lines]
        widths = [max(len(row[j]) for row in table) for j in range(len(table[0]))]
        out.append("")
        fmt = lambda row: "  ".join(  # noqa: E731
            c.ljust(w) if j == 0 else c.rjust(w) for j, (c, w) in enumerate(zip(row, widths, strict=True)))
        out.append(fmt(table[0]))
        out.append("-" * len(out[-1]))
        out += [fmt(row) for row in table[1:]]
        out.append("")
        out += notes
        return "\n".join(out)

    __repr__ = __str__

    def _repr_html_(self) -> str:
        lines, table, notes = self._blocks()
        e = html.escape
        parts = ["<div class='envlink-fit'><h4>Mixed-effects meta-regression</h4><table>"]
        parts += [f"<tr><th style='text-align:left'>{e(a)}</th><td>{e(b)}</td></tr>" for a, b in lines]
        parts.append("</table><table><thead><tr>")
        parts += [f"<th>{e(h)}</th>" for h in table[0]]
        parts.append("</tr></thead><tbody>")
        for row in table[1:]:
            parts.append("<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>")
        parts.append("</tbody></table><ul>")
        parts += [f"<li>{e(n)}</li>" for n in notes]
        parts.append("</ul></div>")
        return "".join(parts)
