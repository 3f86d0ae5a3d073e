"""The [model] step of a project run: which rows and columns the meta-regression uses.

Numbers read as text from the studies table (decimal commas, full-width digits) are
read once here, so a numeric moderator never becomes a category by accident.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from envlink._projectschema import formula_columns, where
from envlink.errors import InputError
from envlink.tables import label_text

__all__ = ["fit_model"]


def _label_columns(model: Mapping[str, Any]) -> set[str]:
    """Columns the model uses as labels (kept as text)."""
    return {model[k] for k in ("nested", "cluster") if k in model}


def _numeric_columns(project: Any, table: pd.DataFrame, needed: list[str], formula: str,
                     labels: set[str]) -> dict[str, np.ndarray]:
    """The model's number columns as float64 (:func:`envlink.tables.number_columns`).

    The effect and the variance must be numbers; every moderator that is not a label or
    written ``C(col)`` in the formula is a number column when any of its cells is one,
    so a numeric moderator never silently becomes a category with one level per value.
    """
    from envlink.tables import number_columns

    columns = [c for c in dict.fromkeys(needed)
               if c not in labels and not re.search(rf"\bC\(\s*{re.escape(c)}\b", formula)]
    return number_columns(
        table, columns, numbers=needed[:2], where=where(project, "model"),
        hint="write C({col}) in the moderators if the column is a category",
    )


def fit_model(project: Any, table: pd.DataFrame, effect: str, variance: str) -> tuple[Any, np.ndarray, Any]:
    """Fit the project's [model] to the usable rows; returns the fit, the rows used and Egger's test."""
    import envlink

    model = project.section("model")
    formula = model.get("moderators")
    needed = [effect, variance]
    if formula:
        needed += formula_columns(formula, [str(c) for c in table.columns])
    needed += [model[k] for k in ("nested", "cluster") if k in model]
    numeric = _numeric_columns(project, table, needed, formula or "", _label_columns(model))
    ok = np.ones(len(table), dtype=bool)
    lacking: dict[str, int] = {}
    missing: dict[str, np.ndarray] = {}
    if "locate_status" in table:
        ok &= table["locate_status"].astype(str).to_numpy() != "rejected"
        lacking["rejected by locate"] = int((~ok).sum())
    for col in dict.fromkeys(needed):
        if col in numeric:
            has = np.isfinite(numeric[col]) & ((numeric[col] > 0) if col == variance else True)
        else:
            s = table[col]
            has = (s.notna() & (s.astype(str).str.strip() != "")).to_numpy()
        lacking[repr(col)] = int((~has).sum())
        missing[col] = ~has
        ok &= has
    if len(table) == 0:
        raise InputError(
            f"{where(project, 'model')}: the studies table {str(project.studies)!r} has no data "
            "rows (only a header), so there is nothing to fit."
        )
    if ok.sum() < 3:
        counts = ", ".join(f"{what} {n}" for what, n in lacking.items() if n)
        hint = ""
        for col in dict.fromkeys(needed):
            flags = f"{col}_flags"
            if lacking.get(repr(col)) and flags in table:
                common = table.loc[missing[col], flags].astype(str).replace("", np.nan).dropna().value_counts()
                if len(common):
                    hint = f" Most rows lacking {col!r} are flagged {common.index[0]!r} (see {flags})."
                    break
        raise InputError(
            f"{where(project, 'model')}: only {int(ok.sum())} of {len(table)} rows have a finite "
            f"effect, a positive variance and every moderator ({', '.join(needed)}); the model "
            f"needs at least 3. "
            + (f"Rows lacking each: {counts}.{hint}" if counts else f"The table has only {len(table)}.")
        )
    data = table.loc[ok].reset_index(drop=True)
    for col, values in numeric.items():  # numbers read as text from the studies table
        data[col] = values[ok]
    for col in dict.fromkeys(needed):  # labels and categories: white space is not a level
        if col not in numeric:
            data[col] = label_text(data[col].astype(str))
    options = {k: model[k] for k in ("method", "test", "nested", "cluster") if k in model}
    reg = envlink.MetaRegression(moderators=formula, **options)
    try:
        fit = reg.fit(data, effect=effect, variance=variance)
    except InputError as exc:
        key = "moderators" if formula else None
        raise InputError(f"{where(project, 'model', *([key] if key else []))}: {exc}") from exc
    egger = envlink.egger_test(numeric[effect][ok], numeric[variance][ok])
    return fit, ok, egger
