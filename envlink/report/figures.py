"""The model figures (bubble, forest, funnel, residuals) from a fitted model and its table.

Used by the HTML report (:mod:`envlink.report.html`) and on their own by
``envlink fit --figures DIR`` (:func:`write_figures`). The fit is any object with
``to_dict()`` (the JSON layout of docs/methods.md, "Result fields") and
``predict(DataFrame, prediction=...)``; the rows it used come from the table's
``fit_included`` column, else from the fit's ``included_``.

The bubble plot draws the effect against the first numeric term of the model in
formula order (a plain column of numbers), whatever the order of the table's
columns; a model with only categorical moderators has no bubble plot, and the
other figures still appear.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.columns import FIT_INCLUDED
from envlink.report import plots
from envlink.report.vocabulary import FOREST_ORDERS

__all__ = ["FOREST_ORDERS", "ModelFigure", "fitted_rows", "first_numeric_term", "model_figures",
           "write_figures"]


@dataclass
class ModelFigure:
    """One model figure: its short ``name`` (the file stem), the figure, and its caption.

    ``figure`` is None when it could not be drawn; ``caption`` then says why.
    ``path`` is the PNG file :func:`write_figures` wrote, if any.
    """

    name: str
    figure: Any
    caption: str
    path: Path | None = None


def fitted_rows(table: pd.DataFrame, fit: Any) -> np.ndarray | None:
    """The rows the model used: the table's ``fit_included`` column, else the fit's ``included_``."""
    if FIT_INCLUDED in table.columns:
        col = table[FIT_INCLUDED]
        if pd.api.types.is_bool_dtype(col):
            return col.to_numpy(dtype=bool)
        return col.astype(str).str.strip().str.lower().isin(("true", "1", "yes")).to_numpy()
    included = getattr(fit, "included_", None)
    if included is not None and len(included) == len(table):
        return np.asarray(included, dtype=bool)
    return None


def _numeric(frame: pd.DataFrame, column: str) -> bool:
    """Whether every non-missing cell of ``column`` is a number (and there is one)."""
    if column not in frame.columns:
        return False
    cells = frame[column]
    values = pd.to_numeric(cells, errors="coerce")
    return bool(values.notna().sum() == cells.notna().sum() > 0)


def first_numeric_term(table: pd.DataFrame, terms: Sequence[str]) -> str | None:
    """The first coefficient term, in formula order, that is a plain numeric column of ``table``.

    Examples
    --------
    >>> t = pd.DataFrame({"method": ["a", "b"], "sst": [1.0, 2.0]})
    >>> first_numeric_term(t, ["intercept", "method[T.b]", "sst"])
    'sst'
    """
    for term in terms:
        if term != "intercept" and _numeric(table, term):
            return term
    return None


def _typical(used: pd.DataFrame, moderator: str | None, n: int) -> tuple[pd.DataFrame, list[str]]:
    """``n`` rows at typical values: numeric columns at their mean, others at their most common value."""
    new = used.iloc[np.zeros(n, dtype=int)].reset_index(drop=True).copy()
    held: list[str] = []
    for col in used.columns:
        if col == moderator:
            continue
        values = pd.to_numeric(used[col], errors="coerce")
        if values.notna().all():
            new[col] = float(values.mean())
        elif used[col].notna().any():
            new[col] = used[col].mode(dropna=True).iloc[0]
        held.append(col)
    return new, held


def _used_rows(table: pd.DataFrame, fit: Any, effect: str, variance: str) -> pd.DataFrame | str:
    d = fit.to_dict()
    mask = fitted_rows(table, fit)
    if mask is None:
        return f"the table has no {FIT_INCLUDED} column saying which rows the model used"
    used = table[mask].copy()
    for col in (effect, variance):
        used[col] = pd.to_numeric(used[col], errors="coerce")
    for col in used.columns:  # numbers written as text (a table read as written) as numbers
        if not pd.api.types.is_numeric_dtype(used[col]) and _numeric(used, col):
            used[col] = pd.to_numeric(used[col])
    if len(used) != d["model"]["effects_used"]:
        return f"{len(used)} rows are marked as used here but the model used {d['model']['effects_used']}"
    return used


def _bubble(fit: Any, d: Mapping[str, Any], used: pd.DataFrame, moderator: str | None, *,
            effect: str, variance: str, prediction: str) -> ModelFigure:
    terms = [c["term"] for c in d["coefficients"]["table"]]
    level = d["model"]["confidence_level"]
    if moderator is None:
        moderator = first_numeric_term(used, terms)
        if moderator is None:
            why = ("the model has no moderators" if len(terms) <= 1 else
                   "the model has no numeric moderator (its terms: " + ", ".join(terms[1:]) + ")")
            return ModelFigure("bubble", None, f"No bubble plot: {why}.")
        chosen = f"{moderator}, the first numeric term of the model"
    elif not _numeric(used, moderator):
        return ModelFigure("bubble", None, f"No bubble plot: {moderator!r} is not a numeric "
                           "column of the rows the model used.")
    else:
        chosen = moderator
    x = pd.to_numeric(used[moderator]).to_numpy(dtype=float)
    xs = np.linspace(np.nanmin(x), np.nanmax(x), 60)
    new, held = _typical(used, moderator, xs.size)
    new[moderator] = xs
    try:
        pred = fit.predict(new, prediction=prediction)
    except Exception as exc:  # noqa: BLE001 - a figure must not sink the report
        return ModelFigure("bubble", None, f"No bubble plot: prediction failed ({exc}).")
    tau2 = float(d["heterogeneity"]["tau2"] or 0.0)
    y, v = used[effect].to_numpy(float), used[variance].to_numpy(float)
    fig = plots.bubble_plot(x, y, 1.0 / (v + tau2), line_x=xs, xlabel=moderator, ylabel=effect,
                            level=level, **{k: pred[k].to_numpy(float) for k in
                                            ("estimate", "ci_low", "ci_high", "pi_low", "pi_high")})
    others = [t for t in terms[1:] if t != moderator]
    caption = (f"{effect} against {chosen}; bubble area proportional to the random-effects "
               f"weight; {level:.0%} confidence band and {level:.0%} prediction band")
    if others:
        caption += ("; the other moderators held at typical values (numbers at their mean, "
                    "categories at their most common level)")
    return ModelFigure("bubble", fig, caption + ".")


def _summary_row(fit: Any, d: Mapping[str, Any], used: pd.DataFrame, prediction: str) -> dict[str, Any] | None:
    """The forest plot's summary row: the pooled effect, or the model at typical moderator values."""
    pooled = d["model"]["coefficient_count"] == 1
    try:
        new, _ = _typical(used, None, 1)
        row = fit.predict(new, prediction=prediction).iloc[0]
    except Exception:  # noqa: BLE001 - the forest plot is drawn without a summary row
        return None
    return {"label": "pooled effect" if pooled else "model at typical moderator values",
            "estimate": row["estimate"], "low": row["ci_low"], "high": row["ci_high"],
            "pi_low": row["pi_low"], "pi_high": row["pi_high"]}


def _forest(fit: Any, d: Mapping[str, Any], used: pd.DataFrame, *, effect: str, variance: str,
            label: str | None, order: str, prediction: str) -> ModelFigure:
    level = d["model"]["confidence_level"]
    rule = FOREST_ORDERS.parse(order).entry
    if label and label in used.columns:
        labels = used[label].astype(str).tolist()
        named = f"labelled by {label}"
    else:
        labels = [f"row {i + 1}" for i in used.index]
        named = "labelled by table row"
    summary = _summary_row(fit, d, used, prediction)
    fig = plots.forest_plot(labels, used[effect].to_numpy(float), used[variance].to_numpy(float),
                            summary=summary, level=level, xlabel=effect, order=rule.obj)
    caption = (f"Each effect with its {level:.0%} confidence interval (from its sampling variance), "
               f"{named}, ordered: {rule.summary}; values on the right.")
    if summary is not None:
        caption += (f" Bottom row: the {summary['label']} (diamond: {level:.0%} confidence "
                    f"interval; bar: {level:.0%} prediction interval).")
    return ModelFigure("forest", fig, caption)


def _funnel(d: Mapping[str, Any], used: pd.DataFrame, *, effect: str, variance: str,
            egger: Any) -> ModelFigure:
    y, v = used[effect].to_numpy(float), used[variance].to_numpy(float)
    tau2 = float(d["heterogeneity"]["tau2"] or 0.0)
    level = d["model"]["confidence_level"]
    if d["model"]["coefficient_count"] == 1:
        centre, what = d["coefficients"]["table"][0]["estimate"], "the pooled random-effects estimate"
    else:
        w = 1.0 / (v + tau2)
        centre, what = float(np.sum(w * y) / np.sum(w)), "the weighted mean effect (the model has moderators)"
    e_int, e_slope = _get(egger, "intercept"), _get(egger, "slope")
    fig = plots.funnel_plot(y, v, pooled=centre, egger_intercept=e_int, egger_slope=e_slope,
                            xlabel=effect, level=level)
    caption = f"Effects by precision, centred on {what}; the shaded wedge holds {level:.0%} of effects if all estimated the centre."
    if e_int is not None:
        caption += (" The dashed line is Egger's regression; an intercept far from zero suggests "
                    "small-study asymmetry.")
    return ModelFigure("funnel", fig, caption)


def _get(obj: Any, *names: str) -> Any:
    for n in names:
        if isinstance(obj, Mapping) and n in obj:
            return obj[n]
        if obj is not None and hasattr(obj, n):
            return getattr(obj, n)
    return None


def _residuals(fit: Any, used: pd.DataFrame, *, effect: str) -> ModelFigure:
    try:
        fitted = fit.predict(used.reset_index(drop=True))["estimate"].to_numpy(float)
        y = used[effect].to_numpy(float)
        resid, name = y - fitted, "raw residual"
        if hasattr(fit, "standardized_residuals"):
            sr = fit.standardized_residuals()
            if isinstance(sr, pd.DataFrame):  # one row per input row; dropped rows flagged
                if "dropped" in sr.columns:
                    sr = sr[~sr["dropped"].astype(bool)]
                sr = sr["z"] if "z" in sr.columns else sr.iloc[:, 0]
            sr = np.asarray(sr, dtype=float)
            if sr.shape == resid.shape:
                resid, name = sr, "standardised residual"
    except Exception as exc:  # noqa: BLE001 - a figure must not sink the report
        return ModelFigure("residuals", None, f"No residual plot: {exc}.")
    return ModelFigure("residuals", plots.residual_plot(fitted, resid, ylabel=name),
                       f"{name.capitalize()}s against fitted values; a funnel or a curve "
                       "suggests a missing term or a wrong scale.")


def model_figures(table: pd.DataFrame, fit: Any, *, effect: str = "effect",
                  variance: str = "variance", moderator: str | None = None,
                  label: str | None = None, forest_order: str = "effect", egger: Any = None,
                  prediction: str = "tests") -> list[ModelFigure]:
    """The model figures: bubble, forest, funnel and residuals, each with its caption.

    Parameters
    ----------
    table : pandas.DataFrame
        The table the model was fitted to (with ``fit_included``, or the fit's own rows).
    fit : fitted model
        See the module docstring.
    effect, variance : str
        Effect and sampling-variance columns.
    moderator : str, optional
        Numeric column for the bubble plot; default the first numeric term of the model.
    label : str, optional
        Column labelling the forest plot's rows (a study, site or year).
    forest_order : str, default "effect"
        A name of :data:`FOREST_ORDERS`.
    egger : object or mapping, optional
        Egger's test result with ``intercept`` and ``slope``, drawn on the funnel plot.
    prediction : str, default "tests"
        The prediction interval's rule, passed to ``fit.predict``.

    Returns
    -------
    list of ModelFigure
        A figure that cannot be drawn is kept, with ``figure=None`` and the reason as
        its caption. Without the rows the model used, a single such entry.
    """
    FOREST_ORDERS.parse(forest_order)  # a bad name is an error before any drawing
    used = _used_rows(table, fit, effect, variance)
    if isinstance(used, str):
        return [ModelFigure("model", None, f"Model figures skipped: {used}.")]
    d = fit.to_dict()
    return [
        _bubble(fit, d, used, moderator, effect=effect, variance=variance, prediction=prediction),
        _forest(fit, d, used, effect=effect, variance=variance, label=label, order=forest_order,
                prediction=prediction),
        _funnel(d, used, effect=effect, variance=variance, egger=egger),
        _residuals(fit, used, effect=effect),
    ]


#: the files :func:`write_figures` may write into its folder
FIGURE_FILES = ("bubble.png", "forest.png", "funnel.png", "residuals.png")


def write_figures(folder: str | Path, table: pd.DataFrame, fit: Any, **options: Any
                  ) -> list[ModelFigure]:
    """Write the model figures as PNG files (``bubble.png``, ``forest.png``...) into ``folder``.

    ``options`` are those of :func:`model_figures`. The folder is created when missing;
    each file is written atomically and replaced if it exists.

    Returns
    -------
    list of ModelFigure
        Every figure of :func:`model_figures`, with ``path`` set where a file was
        written; a figure that cannot be drawn has no file and says why in its caption.
    """
    from envlink.core.util import atomic_path

    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    items = model_figures(table, fit, **options)
    for item in items:
        if item.figure is None:
            continue
        item.path = out / f"{item.name}.png"
        with atomic_path(item.path) as tmp:
            tmp.write_bytes(plots.figure_png(item.figure))
    return items
