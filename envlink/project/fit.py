"""The [model] step of a project run: the model frame of the table, then the fit.

Which rows enter the fit is decided by :func:`envlink.metareg.frame.model_frame`, the
rule ``envlink fit`` and ``MetaRegression.fit`` follow too; the run records it in the
enriched table's ``fit_included`` column. Numbers read as text from the studies table
(decimal commas, full-width digits) are read once here
(:func:`envlink.metareg.frame.read_model_columns`), so a numeric moderator never
becomes a category by accident.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from envlink.errors import InputError, ModelError, TooFewRowsError
from envlink.project.schema import where

__all__ = ["fit_model"]


def _frame(project: Any, table: pd.DataFrame, effect: str, variance: str) -> Any:
    """The model frame of ``table`` under the project's [model], errors located in the file."""
    from envlink.metareg.formula import formula_variables
    from envlink.metareg.frame import model_frame, read_model_columns

    model = project.section("model")
    formula = model.get("moderators")
    names = {"moderators": formula, "nested": model.get("nested"), "cluster": model.get("cluster")}
    try:
        formula_variables(formula)
    except InputError as exc:
        raise InputError(f"{where(project, 'model', 'moderators')}: {exc}") from exc
    data = read_model_columns(table, effect=effect, variance=variance, **names,
                              where=where(project, "model"))
    try:
        return model_frame(data, effect=effect, variance=variance, **names, skip_rejected=True)
    except InputError as exc:
        raise InputError(f"{where(project, 'model', *(['moderators'] if formula else []))}: "
                         f"{exc}") from exc
    except ModelError as exc:
        raise ModelError(f"{where(project, 'model')}: {exc}") from exc


def _too_few(project: Any, table: pd.DataFrame, frame: Any) -> TooFewRowsError:
    """The message when fewer than 3 rows can enter the fit: what each row lacks."""
    ok = frame.included
    counts = ", ".join(f"{what if what == 'rejected by locate' else repr(what)} {int(n.sum())}"
                       for what, n in frame.lacking.items() if n.any())
    hint = ""
    for col in frame.columns:
        flags = f"{col}_flags"
        if frame.lacking[col].any() and flags in table:
            common = table.loc[frame.lacking[col], flags].astype(str).replace("", np.nan).dropna().value_counts()
            if len(common):
                hint = f" Most rows lacking {col!r} are flagged {common.index[0]!r} (see {flags})."
                break
    return TooFewRowsError(
        f"{where(project, 'model')}: only {int(ok.sum())} of {len(table)} rows have a finite "
        f"effect, a positive variance and every moderator ({', '.join(frame.columns)}); the model "
        f"needs at least 3. "
        + (f"Rows lacking each: {counts}.{hint}" if counts else f"The table has only {len(table)}.")
    )


def fit_model(project: Any, table: pd.DataFrame, effect: str, variance: str) -> tuple[Any, np.ndarray, Any]:
    """Fit the project's [model] to the usable rows; returns the fit, the rows used and Egger's test."""
    import envlink

    model = project.section("model")
    frame = _frame(project, table, effect, variance)
    if len(table) == 0:
        raise InputError(
            f"{where(project, 'model')}: the studies table {str(project.studies)!r} has no data "
            "rows (only a header), so there is nothing to fit."
        )
    if frame.included.sum() < 3:
        raise _too_few(project, table, frame)
    options = {k: model[k] for k in ("method", "test", "nested", "cluster") if k in model}
    formula = model.get("moderators")
    reg = envlink.MetaRegression(moderators=formula, **options)
    try:
        fit = reg.fit(frame.data.reset_index(drop=True), effect=effect, variance=variance)
    except InputError as exc:
        key = "moderators" if formula else None
        cls = TooFewRowsError if isinstance(exc, TooFewRowsError) else InputError
        raise cls(f"{where(project, 'model', *([key] if key else []))}: {exc}") from exc
    used = frame.data
    egger = envlink.egger_test(used[effect].to_numpy(np.float64), used[variance].to_numpy(np.float64))
    return fit, frame.included, egger
