"""Moderator formulas and row numbers in messages: the formula's variables, its categories, its errors.

Formulas are right-hand sides read by formulaic; :func:`formula_variables` is the
one way envlink finds the columns a formula needs (the model frame, ``envlink fit``
and the project run all call it). Rows in messages count from 1, as everywhere in
envlink (:func:`rows_text`).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

import numpy as np

from envlink.errors import InputError

__all__ = ["INTERCEPT", "formula_variables", "formula_columns", "category_columns", "rows_text",
           "formula_text", "formula_problem", "moderator_positions", "formula_name"]

#: name of the intercept term in every output
INTERCEPT = "intercept"


def _py(x: Any) -> Any:
    """A plain Python scalar for messages (no ``np.int64(...)`` reprs)."""
    return x.item() if isinstance(x, np.generic) else x


def formula_text(moderators: str | None, intercept: bool) -> str:
    """The formula formulaic reads: the user's right-hand side, ``0 + ...`` without intercept.

    Examples
    --------
    >>> formula_text("x", True), formula_text("x", False), formula_text(None, True)
    ('x', '0 + x', '1')
    """
    rhs = (moderators or "").strip()
    if not rhs:
        return "1" if intercept else "0"
    return rhs if intercept else f"0 + {rhs}"


def _default_index(index: Any) -> bool:
    """Whether row labels are the positions 0, 1, ... (so rows need no label besides their number)."""
    if index is None:
        return True
    a = np.asarray(index)
    return a.dtype.kind in "iu" and np.array_equal(a, np.arange(a.shape[0]))


def rows_text(positions: Sequence[int] | np.ndarray, index: Any = None, *, limit: int = 5) -> str:
    """Rows by number counted from 1 (the first data row is row 1), as every envlink message counts.

    ``positions`` are 0-based positions in the input; ``index`` holds the input's
    row labels, shown beside the numbers when they are not simply 0, 1, ....

    Examples
    --------
    >>> rows_text([0]), rows_text([71, 72, 73])
    ('row 1', 'rows 72, 73, 74')
    >>> rows_text([0, 2], ["a", "b", "c"])
    "rows 1, 3 (index 'a', 'c')"
    >>> rows_text(range(7))
    'rows 1, 2, 3, 4, 5 and 2 more'
    """
    pos = [int(i) for i in positions]
    shown = pos[:limit]
    text = ("row " if len(pos) == 1 else "rows ") + ", ".join(str(i + 1) for i in shown)
    if not _default_index(index):
        labels = np.asarray(index)
        text += " (index " + ", ".join(repr(_py(labels[i])) for i in shown) + ")"
    if len(pos) > limit:
        text += f" and {len(pos) - limit} more"
    return text


_ANSI = re.compile(r"\x1b\[[0-9;]*[A-Za-z]")
_MARKED = re.compile(r"\u29db(.*?)\u29da", re.S)


def formula_problem(exc: Exception, moderators: str | None, intercept: bool) -> str:
    """formulaic's complaint in plain text: the reason, then the formula with a caret under the fault.

    formulaic marks the faulty part with terminal colour codes between two brackets;
    they are removed, and a line of ``^`` under the user's own formula points at it.
    """
    text = _ANSI.sub("", str(exc))
    reason, _, shown = text.partition("\n\n")
    reason = _MARKED.sub(r"\1", reason).strip().replace("insuffient", "insufficient")
    reason = reason[:1].lower() + reason[1:] if reason[:2] != reason[:2].upper() else reason
    if reason and reason[-1] not in ".]":
        reason += "."
    m = _MARKED.search(shown)
    user = moderators or ""
    if m is None:
        return reason
    lead = len(user) - len(user.lstrip())
    start = m.start() - (0 if intercept or not user.strip() else len("0 + ")) + lead
    token = m.group(1)
    if not 0 <= start < len(user) or not token:
        return f"{reason} (at {token!r})"
    width = max(1, min(len(token), len(user) - start))
    return f"at character {start + 1} ({token!r}): {reason}\n    {user}\n    {' ' * start}{'^' * width}"


def formula_variables(moderators: str | None, *, intercept: bool = True) -> list[str]:
    """The variables (columns) a moderator formula needs; a bad formula is an :class:`InputError`.

    The formula is a right-hand side only (the effect column is given apart); the
    error quotes it and points at the problem with a caret, in plain text.

    Examples
    --------
    >>> formula_variables("sst_anom + C(method) + I(depth ** 2)")
    ['depth', 'method', 'sst_anom']
    >>> print(formula_variables("sst_anom +"))
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Cannot parse the moderator formula 'sst_anom +': at character 10 ('+'): operator `+` has insufficient arguments and/or is misplaced.
        sst_anom +
                 ^
    """
    from formulaic import Formula, SimpleFormula
    from formulaic.errors import FormulaicError

    text = formula_text(moderators, intercept)
    try:
        formula = Formula(text)
    except FormulaicError as exc:
        raise InputError(f"Cannot parse the moderator formula {moderators!r}: "
                         f"{formula_problem(exc, moderators, intercept)}") from None
    except Exception as exc:  # noqa: BLE001 - any failure to parse is the formula's fault
        raise InputError(f"Cannot parse the moderator formula {moderators!r}: "
                         f"{type(exc).__name__}: {exc}") from None
    if not isinstance(formula, SimpleFormula):
        raise InputError(
            f"The moderator formula {moderators!r} must be a right-hand side only, such as "
            "'sst_anom + C(method)': the effect column is given apart (effect= / --effect), "
            "so '~' and '|' have no place in it."
        )
    return sorted(_variables(formula))


def _variables(formula: Any) -> set[str]:
    """The columns of a parsed formula: a looked-up name whole (a backticked ```depth.m```
    is one column), the roots of the names a Python term uses (``bs(x, df=3)`` needs x)."""
    from formulaic.parser.types import Factor
    from formulaic.transforms import TRANSFORMS
    from formulaic.utils.variables import get_expression_variables

    names: set[str] = set()
    for term in formula:
        for factor in term.factors:
            if factor.eval_method == Factor.EvalMethod.LOOKUP:
                names.add(str(factor.expr))
            elif factor.eval_method == Factor.EvalMethod.PYTHON:
                found = set(factor.required_variables)
                try:
                    found |= get_expression_variables(str(factor.expr), {})
                except Exception:  # noqa: BLE001 - backticked names: formulaic's own list stands
                    pass
                names.update(v.root for v in found if v.root not in TRANSFORMS)
    return names


def formula_name(column: object) -> str:
    """A column as a formula names it: plain when it is a Python name, else in backticks.

    Examples
    --------
    >>> formula_name("depth"), formula_name("my x"), formula_name("depth.m"), formula_name("class")
    ('depth', '`my x`', '`depth.m`', '`class`')
    """
    import keyword

    text = str(column)
    return text if text.isidentifier() and not keyword.iskeyword(text) else f"`{text}`"


def category_columns(moderators: str | None, columns: Sequence[str]) -> set[str]:
    """Columns of ``columns`` written ``C(col ...)`` in the formula (categories by the user's choice).

    Examples
    --------
    >>> sorted(category_columns("depth + C(zone, Treatment('reef')) + C( year)", ["depth", "zone", "year"]))
    ['year', 'zone']
    """
    text = moderators or ""
    return {c for c in columns if re.search(rf"\bC\(\s*{re.escape(str(c))}\s*[,)]", text)}


def formula_columns(moderators: str | None, columns: Sequence[Any]) -> list[str]:
    """The columns of ``columns`` that the formula needs, in the order of ``columns``.

    The variables are found by :func:`formula_variables` (formulaic), so a name used
    only as a function (``np.log``) or inside a string is not a column.

    Examples
    --------
    >>> formula_columns("C(zone) + np.log(depth)", ["site", "depth", "zone", "np"])
    ['depth', 'zone']
    >>> formula_columns(None, ["depth"])
    []
    """
    needed = set(formula_variables(moderators))
    return [str(c) for c in columns if str(c) in needed]


def moderator_positions(terms: list[str]) -> list[int]:
    """Positions of the coefficients tested by Q_M: every term but the intercept.

    Examples
    --------
    >>> moderator_positions(["intercept", "x", "z"])
    [1, 2]
    """
    return [j for j, n in enumerate(terms) if n != INTERCEPT]
