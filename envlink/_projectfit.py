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

__all__ = ["fit_model"]

_WHITE = re.compile(r"\s+")
_INVISIBLE = dict.fromkeys(map(ord, "\u200b\u200c\u200d\u2060\ufeff\u00ad"))


def _label_columns(model: Mapping[str, Any]) -> set[str]:
    """Columns the model uses as labels (kept as text)."""
    return {model[k] for k in ("nested", "cluster") if k in model}


def _numeric_columns(project: Any, table: pd.DataFrame, needed: list[str], formula: str,
                     labels: set[str]) -> dict[str, np.ndarray]:
    """The model's number columns as float64, read as :func:`parse_numbers` reads them.

    The effect, the variance and every moderator that is not a label or written
    ``C(col)`` in the formula are numbers when any of their cells is one; a cell that
    is then not a number (``approx. 5``) is an :class:`InputError` naming its rows,
    rather than the column silently becoming a category with one level per value.
    """
    from envlink.tables import parse_numbers

    effect, variance = needed[0], needed[1]
    out: dict[str, np.ndarray] = {}
    for col in dict.fromkeys(needed):
        if col in labels or re.search(rf"\bC\(\s*{re.escape(col)}\b", formula):
            continue
        values, unreadable = parse_numbers(table[col])
        if col not in (effect, variance) and not np.isfinite(values).any():
            continue  # a text column: a category
        if unreadable.any():
            rows = np.flatnonzero(unreadable)
            shown = ", ".join(f"row {i + 1} {str(table[col].iloc[i])!r}" for i in rows[:5])
            more = f" and {rows.size - 5} more" if rows.size > 5 else ""
            raise InputError(
                f"{where(project, 'model')}: the column {col!r} holds numbers, but {shown}{more} "
                f"{'is' if rows.size == 1 else 'are'} not a number. Write a number or leave the "
                f"cell blank (blank rows are left out of the fit); write C({col}) in the "
                "moderators if the column is a category."
            )
        out[col] = values
    return out


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
            data[col] = [_WHITE.sub(" ", str(v).translate(_INVISIBLE)).strip() for v in data[col].tolist()]
    options = {k: model[k] for k in ("method", "test", "nested", "cluster") if k in model}
    reg = envlink.MetaRegression(moderators=formula, **options)
    try:
        fit = reg.fit(data, effect=effect, variance=variance)
    except InputError as exc:
        key = "moderators" if formula else None
        raise InputError(f"{where(project, 'model', *([key] if key else []))}: {exc}") from exc
    egger = envlink.egger_test(numeric[effect][ok], numeric[variance][ok])
    return fit, ok, egger
