"""The model frame: the one rule for which rows and columns of a table enter a meta-regression.

:func:`model_frame` decides it for :meth:`MetaRegression.fit(data) <envlink.metareg.MetaRegression.fit>`,
for ``envlink fit`` and for the project run (whose enriched table records the answer
in ``fit_included``, which the report reads). A row is left out when

- the locate stage rejected it (``locate_status`` is ``rejected``), when asked
  (``skip_rejected=True``: the project run and ``envlink fit`` ask; a plain
  ``MetaRegression.fit(table)`` uses the table's rows as they are);
- its effect or sampling variance is missing (blank, NaN);
- a moderator column the formula needs is missing there (a number column: missing
  or not finite);
- its ``nested`` or ``cluster`` label is missing.

A variance that is zero, negative or infinite, and an infinite effect, are errors
naming the row (:class:`~envlink.errors.InvalidValueError`: bad input; a zero
variance usually means a zero cell that needs a continuity correction). Columns a formula
needs are found by :func:`~envlink.metareg.formula.formula_variables`.

Tables read as the user wrote them (CSV cells as text) first go through
:func:`read_model_columns`: numbers written as text are read, labels lose their
surrounding white space and blank labels are missing.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.util import did_you_mean
from envlink.errors import InputError
from envlink.metareg.formula import (
    category_columns,
    formula_columns,
    formula_name,
    formula_variables,
    rows_text,
)

__all__ = ["ModelFrame", "model_frame", "read_model_columns", "REJECTED"]

#: reason key of the rows the locate stage rejected
REJECTED = "rejected by locate"
_STATUS = "locate_status"


@dataclass(frozen=True)
class ModelFrame:
    """Which rows and columns of a table enter a fit, and the rows themselves.

    Attributes
    ----------
    data : pandas.DataFrame
        The included rows (input index kept), effect and variance as float64.
    included : numpy.ndarray of bool
        One value per input row: whether it enters the fit.
    effect, variance : str
        The effect and sampling-variance columns.
    moderators : str or None
        The formula.
    columns : list of str
        The model's columns: effect, variance, the formula's variables in table
        order, then the nested and cluster columns.
    groups : dict
        ``{"nested": column, "cluster": column}`` for the options given.
    lacking : dict
        Reason -> boolean mask of the input rows it excludes (``"rejected by locate"``
        and one key per model column; a row may lack several).
    index : numpy.ndarray
        The input's row labels (for messages).
    """

    data: pd.DataFrame
    included: np.ndarray
    effect: str
    variance: str
    moderators: str | None
    columns: list[str]
    groups: dict[str, str] = field(default_factory=dict)
    lacking: dict[str, np.ndarray] = field(default_factory=dict)
    index: np.ndarray | None = None

    @property
    def n_excluded(self) -> int:
        """How many input rows are left out."""
        return int((~self.included).sum())

    def check_options(self, moderators: str | None, nested: Any, cluster: Any) -> None:
        """Refuse to fit this frame with other moderators, nested or cluster columns."""
        groups = {r: c for r, c in (("nested", nested), ("cluster", cluster)) if c}
        if moderators != self.moderators or groups != self.groups:
            raise InputError("The model frame was made for other moderators, nested or cluster "
                             "columns than this model's; make it with the model's options.")

    def reason(self) -> str:
        """Why rows are left out, in words for the fit's note."""
        words = "missing effect, variance or moderator values"
        if REJECTED in self.lacking and self.lacking[REJECTED].any():
            return f"rejection by locate or {words}"
        return words


def _is_text(s: pd.Series) -> bool:
    return bool(pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s))


def _check_columns(data: pd.DataFrame, wanted: Sequence[str], needed: Sequence[str],
                   moderators: str | None) -> None:
    for col in wanted:
        if col not in data.columns:
            called = col in needed and re.search(rf"(?<![\w.]){re.escape(col)}\s*\(", moderators or "")
            what = (f"{col!r} in the moderator formula {moderators!r} is neither a column of the "
                    "table nor a function the formula knows." if called else
                    f"Column {col!r} is not in the table.")
            raise InputError(
                what + did_you_mean(col, data.columns)
                + f" Available columns: {', '.join(map(str, data.columns))}."
            )


_GROUPED = re.compile(r"[+-]?\d{1,3}(?:,\d{3})+")


def _check_grouped_commas(s: pd.Series, col: str) -> None:
    """Numbers such as '4,524' in every cell: a decimal comma or a thousands separator? Refuse to guess."""
    from envlink.tables import cell_text

    cells = [cell_text(v).strip() for v in s.tolist()]
    filled = [i for i, c in enumerate(cells) if c]
    if filled and all(_GROUPED.fullmatch(cells[i]) for i in filled):
        i = filled[0]
        raise InputError(
            f"Column {col!r} holds numbers written with a comma before three digits "
            f"({rows_text([i], s.index)} holds {cells[i]!r}): a decimal comma or a thousands "
            "separator? envlink does not guess, and as text the column would be a category with "
            "one level per value. Write decimals with '.' (4.524) and no thousands separator, or "
            f"write C({formula_name(col)}) in the moderators if the column is a category."
        )


def _check_text_numbers(data: pd.DataFrame, needed: list[str], moderators: str | None) -> None:
    """A text column of numbers used as a plain term would become one category per value: refuse."""
    from envlink.tables import cell_text, parse_numbers

    chosen = category_columns(moderators, needed)
    for col in needed:
        s = data[col]
        if col in chosen or not _is_text(s):
            continue
        values, unreadable = parse_numbers(s)
        ok = np.flatnonzero(np.isfinite(values))
        if not ok.size:
            _check_grouped_commas(s, col)
            continue  # words: a category, as the user will expect
        i = int(ok[0])
        bad = np.flatnonzero(unreadable)
        fix = ""
        if bad.size:
            j = int(bad[0])
            fix = (f"; {rows_text([j], data.index)} holds {cell_text(s.iloc[j])!r}, which is not "
                   "a number (write a number or leave the cell blank)")
        raise InputError(
            f"Column {col!r} holds numbers written as text ({rows_text([i], data.index)} holds "
            f"{cell_text(s.iloc[i])!r}), so the formula would make it a category with one level "
            f"per value. Convert it to numbers first (envlink.tables.number_columns reads decimal "
            f"commas and unicode minus signs){fix}; write C({formula_name(col)}) in the moderators "
            "if it is a category."
        )


def _numeric(s: pd.Series, name: str, index: np.ndarray) -> np.ndarray:
    """A column as float64; numbers written as text are read as :func:`envlink.tables.parse_numbers` reads them."""
    from envlink.tables import cell_text, parse_numbers

    out, bad = parse_numbers(s)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"Column {name!r} must hold numbers; {rows_text([i], index)} holds "
            f"{cell_text(s.iloc[i])!r} ({int(bad.sum())} such row(s)). Write a number or leave "
            "the cell blank (blank rows are left out of the fit)."
        )
    return out


def _absent(s: pd.Series) -> np.ndarray:
    """Cells that hold no value: missing, or a number that is not finite."""
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        return ~np.isfinite(s.to_numpy(dtype=np.float64, na_value=np.nan))
    return s.isna().to_numpy()


def model_frame(table: pd.DataFrame, *, effect: str = "effect", variance: str = "variance",
                moderators: str | None = None, nested: str | None = None,
                cluster: str | None = None, intercept: bool = True,
                skip_rejected: bool = False) -> ModelFrame:
    """Decide which rows and columns of ``table`` enter the fit (the rules in the module docs).

    Parameters
    ----------
    table : pandas.DataFrame
        Effects, variances and moderators, one row each (numbers as numbers; a table
        of text cells goes through :func:`read_model_columns` first).
    effect, variance : str
        The effect and sampling-variance columns (numbers written as text are read).
    moderators : str, optional
        A formulaic right-hand side.
    nested, cluster : str, optional
        Label columns of the multilevel model and of the cluster-robust tests.
    intercept : bool, default True
    skip_rejected : bool, default False
        Leave out the rows the locate stage rejected (``locate_status`` is
        ``rejected``), as the project run and ``envlink fit`` do.

    Returns
    -------
    ModelFrame

    Raises
    ------
    InputError
        A missing column, a bad formula, text that is not a number.
    InvalidValueError
        A sampling variance that is zero, negative or infinite, or an infinite
        effect, in a row that would enter the fit (the row is named).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> t = pd.DataFrame({"e": [0.1, np.nan, 0.3, 0.2], "v": [0.01, 0.02, 0.01, np.nan],
    ...                   "zone": ["reef", "flat", None, "reef"],
    ...                   "locate_status": ["ok", "ok", "ok", "rejected"]})
    >>> f = model_frame(t, effect="e", variance="v", moderators="C(zone)", skip_rejected=True)
    >>> f.included.tolist(), f.lacking["rejected by locate"].tolist()
    ([True, False, False, False], [False, False, False, True])
    """
    from envlink.metareg.design import check_effects, check_variances

    if not isinstance(table, pd.DataFrame):
        raise InputError(f"fit(data=...) must be a pandas DataFrame; got {type(table).__name__}.")
    needed = formula_variables(moderators, intercept=intercept)
    groups = {role: col for role, col in (("nested", nested), ("cluster", cluster)) if col}
    _check_columns(table, [effect, variance, *needed, *groups.values()], needed, moderators)
    _check_text_numbers(table, needed, moderators)
    index = np.asarray(table.index)
    y = _numeric(table[effect], effect, index)
    v = _numeric(table[variance], variance, index)
    columns = list(dict.fromkeys([effect, variance, *formula_columns(moderators, table.columns),
                                  *groups.values()]))
    lacking: dict[str, np.ndarray] = {}
    if skip_rejected and _STATUS in table.columns:
        lacking[REJECTED] = table[_STATUS].astype(str).to_numpy() == "rejected"
    for col in columns:
        values = y if col == effect else v if col == variance else None
        lacking[col] = np.isnan(values) if values is not None else _absent(table[col])
    included = ~np.logical_or.reduce([*lacking.values(), np.zeros(len(table), dtype=bool)])
    rows = np.flatnonzero(included)
    check_variances(v[included], rows, index, variance)
    check_effects(y[included], rows, index, effect)
    data = table.loc[included].copy()
    data[effect] = y[included]
    data[variance] = v[included]
    return ModelFrame(data, included, effect, variance, moderators, columns, groups, lacking, index)


def read_model_columns(table: pd.DataFrame, *, effect: str, variance: str,
                       moderators: str | None = None, nested: str | None = None,
                       cluster: str | None = None, where: str | Mapping[str, str] = "",
                       hint: str = "write C({col}) in the moderators if the column is a category",
                       ) -> pd.DataFrame:
    """The model's columns of a table of text cells, read: numbers as float64, labels as text.

    CSV cells are text as written, so numbers written as text (decimal commas,
    unicode minus signs) are read here by :func:`envlink.tables.number_columns`: the
    effect and the variance must hold numbers, and a moderator that is not written
    ``C(col)`` (nor a label column) holds numbers when any of its cells is one, so it
    never silently becomes a category with one level per value. Labels and categories
    go through :func:`envlink.tables.label_text` (white space is not a level; a blank
    cell is missing). Other columns are left as they are.

    Parameters
    ----------
    table : pandas.DataFrame
    effect, variance, moderators, nested, cluster
        As for :func:`model_frame`.
    where : str or mapping
        Start of error messages; a mapping gives one per role (``"effect"``,
        ``"variance"``, ``"moderators"``), e.g. the command-line option.
    hint : str
        What the user can do about a moderator cell that is not a number (``{col}``
        is replaced by the column).

    Returns
    -------
    pandas.DataFrame
        A copy of ``table`` with the model's columns read.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"e": ["0,5", "1,5"], "v": ["0.1", "0.2"], "zone": [" reef ", ""]})
    >>> d = read_model_columns(t, effect="e", variance="v", moderators="C(zone)")
    >>> d["e"].tolist(), d["zone"].tolist()
    ([0.5, 1.5], ['reef', None])
    """
    from envlink.tables import label_text, number_columns, require_columns

    w = dict(where) if isinstance(where, Mapping) else dict.fromkeys(
        ("effect", "variance", "moderators"), where)
    variables = formula_variables(moderators)
    labels = [c for c in (nested, cluster) if c]
    numbers: dict[str, np.ndarray] = {}
    for col, role in ((effect, "effect"), (variance, "variance")):
        try:
            require_columns(table, [col])
        except InputError as exc:  # the option or key that names the column goes first
            raise InputError(f"{w[role]}: {exc}" if w.get(role) else str(exc)) from None
        numbers.update(number_columns(table, [col], numbers=[col], where=w.get(role, "")))
    categories = category_columns(moderators, variables)
    plain = [c for c in variables if c in table.columns and c not in categories and c not in labels
             and c not in numbers]
    for col in plain:  # the hint names the column as a formula must write it (`my x`)
        numbers.update(number_columns(table, [col], where=w.get("moderators", ""),
                                      hint=hint.replace("{col}", formula_name(col))))
    data = table.copy()
    for col, values in numbers.items():
        data[col] = values
    for col in dict.fromkeys([*variables, *labels]):
        if col in data.columns and col not in numbers:
            data[col] = label_text(data[col])  # white space is not a level; blank is missing
    return data
