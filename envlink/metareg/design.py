"""Design matrices for the meta-regression: formulas through formulaic, or plain arrays.

The design keeps the moderator columns apart from the intercept (which the sums
imply), so a huge array given by the user is never copied to add a column of ones.
Rows with a missing effect, variance or moderator are dropped, counted and named;
a non-positive or infinite variance is an error naming the row.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from envlink._util import did_you_mean
from envlink.errors import InputError, ModelError

__all__ = ["Design", "design_from_frame", "design_from_arrays", "new_rows", "INTERCEPT",
           "formula_variables", "category_columns", "rows_text"]

#: name of the intercept term in every output
INTERCEPT = "intercept"

_CHECK_BLOCK = 1 << 16


@dataclass
class Design:
    """Effects, variances and moderators ready for fitting.

    ``X`` holds the moderator columns only (``k × m``); ``intercept`` says whether a
    leading column of ones is implied. ``labels`` are the row labels kept (index
    labels of a DataFrame, or positions), ``groups`` the extra columns asked for
    (nested / cluster), aligned with the kept rows.
    """

    y: Any
    v: Any
    X: Any
    intercept: bool
    names: list[str]
    labels: np.ndarray | None
    n_dropped: int = 0
    dropped_labels: list[Any] = field(default_factory=list)
    spec: Any = None
    groups: dict[str, np.ndarray] = field(default_factory=dict)
    keep: np.ndarray | None = None  # mask over the input rows (None: every row kept)
    all_labels: np.ndarray | None = None  # labels of every input row, in order

    @property
    def k(self) -> int:
        return int(self.y.shape[0])

    @property
    def p(self) -> int:
        return self.X.shape[1] + (1 if self.intercept else 0)

    def dense(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return float64 NumPy ``(y, v, X_full)`` with the intercept column (small k only)."""
        y = np.asarray(self.y, dtype=np.float64)
        v = np.asarray(self.v, dtype=np.float64)
        X = np.asarray(self.X, dtype=np.float64)
        if self.intercept:
            X = np.column_stack([np.ones(y.shape[0]), X])
        return y, v, X


def _py(x: Any) -> Any:
    """A plain Python scalar for messages (no ``np.int64(...)`` reprs)."""
    return x.item() if isinstance(x, np.generic) else x


def _formula_text(moderators: str | None, intercept: bool) -> str:
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


def _formula_problem(exc: Exception, moderators: str | None, intercept: bool) -> str:
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

    text = _formula_text(moderators, intercept)
    try:
        formula = Formula(text)
    except FormulaicError as exc:
        raise InputError(f"Cannot parse the moderator formula {moderators!r}: "
                         f"{_formula_problem(exc, moderators, intercept)}") from None
    if not isinstance(formula, SimpleFormula):
        raise InputError(
            f"The moderator formula {moderators!r} must be a right-hand side only, such as "
            "'sst_anom + C(method)': the effect column is given apart (effect= / --effect), "
            "so '~' and '|' have no place in it."
        )
    return sorted(str(n) for n in formula.required_variables)


def category_columns(moderators: str | None, columns: Sequence[str]) -> set[str]:
    """Columns of ``columns`` written ``C(col ...)`` in the formula (categories by the user's choice).

    Examples
    --------
    >>> sorted(category_columns("depth + C(zone, Treatment('reef')) + C( year)", ["depth", "zone", "year"]))
    ['year', 'zone']
    """
    text = moderators or ""
    return {c for c in columns if re.search(rf"\bC\(\s*{re.escape(str(c))}\s*[,)]", text)}


def _is_text(s: pd.Series) -> bool:
    return bool(pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s))


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
            f"commas and unicode minus signs){fix}; write C({col}) in the moderators if it is a "
            "category."
        )


def design_from_frame(data: pd.DataFrame, *, effect: str, variance: str,
                      moderators: str | None, intercept: bool,
                      extra: dict[str, str | None]) -> Design:
    """Build a :class:`Design` from a DataFrame and a formula.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"e": [0.1, 0.3, None, 0.2], "v": [0.01, 0.02, 0.01, 0.03],
    ...                    "x": [1.0, 2.0, 3.0, 4.0]})
    >>> d = design_from_frame(df, effect="e", variance="v", moderators="x",
    ...                       intercept=True, extra={})
    >>> d.k, d.names, d.n_dropped
    (3, ['intercept', 'x'], 1)
    """
    from formulaic import model_matrix
    from formulaic.errors import FormulaicError

    if not isinstance(data, pd.DataFrame):
        raise InputError(f"fit(data=...) must be a pandas DataFrame; got {type(data).__name__}.")
    text = _formula_text(moderators, intercept)
    needed = formula_variables(moderators, intercept=intercept)
    wanted = [effect, variance, *needed, *[c for c in extra.values() if c]]
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
    _check_text_numbers(data, needed, moderators)
    index = np.asarray(data.index)
    y = _numeric(data[effect], effect, index)
    v = _numeric(data[variance], variance, index)
    missing = np.isnan(y) | np.isnan(v)
    for col in needed:
        missing |= data[col].isna().to_numpy()
    for col in [c for c in extra.values() if c]:
        missing |= data[col].isna().to_numpy()
    keep = ~missing
    sub = data.loc[keep]
    yk = y[keep]
    vk = v[keep]
    rows = np.flatnonzero(keep)  # input positions of the kept rows
    labels = index[keep]
    _check_variances(vk, rows, index, variance)
    _check_finite(yk, rows, index, effect)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            mm = model_matrix(text, sub, na_action="raise")
    except (FormulaicError, Warning) as exc:
        raise InputError(f"Cannot build the moderators from {moderators!r}: "
                         f"{_formula_problem(exc, moderators, intercept)}") from None
    cols = [str(c) for c in mm.columns]
    has_int = "Intercept" in cols
    Xdf = pd.DataFrame(np.asarray(mm, dtype=np.float64), columns=cols)
    if has_int:
        Xdf = Xdf.drop(columns="Intercept")
    X = Xdf.to_numpy(dtype=np.float64)
    for j, name in enumerate(Xdf.columns):
        bad = ~np.isfinite(X[:, j])
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"Moderator term {name!r} is not finite in {rows_text([rows[i]], index)} "
                f"(value {float(X[i, j])!r}); check the columns used by {moderators!r}."
            )
    names = ([INTERCEPT] if has_int else []) + list(Xdf.columns)
    dropped = [_py(x) for x in index[~keep]]
    groups = {role: sub[col].to_numpy() for role, col in extra.items() if col}
    return Design(yk, vk, X, has_int, names, labels, len(dropped), dropped, mm.model_spec, groups,
                  keep, index)


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


def _check_variances(v: np.ndarray, rows: np.ndarray, index: Any, name: str) -> None:
    bad = ~(np.isfinite(v) & (v > 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ModelError(
            f"Sampling variance {name!r} must be positive and finite; {rows_text([rows[i]], index)} "
            f"has {float(v[i])!r} ({int(bad.sum())} such row(s)). Fix or remove these rows; a zero "
            "variance usually means a zero cell that needs a continuity correction."
        )


def _check_finite(y: np.ndarray, rows: np.ndarray, index: Any, name: str) -> None:
    bad = ~np.isfinite(y)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ModelError(f"Effect {name!r} must be finite; {rows_text([rows[i]], index)} has "
                         f"{float(y[i])!r}.")


def _is_dask(a: object) -> bool:
    return type(a).__module__.startswith("dask")


def design_from_arrays(y: Any, v: Any, X: Any, *, intercept: bool,
                       groups: dict[str, Any] | None = None) -> Design:
    """Build a :class:`Design` from arrays (NumPy or Dask), checking them in blocks.

    ``X`` holds the moderator columns (``None`` for none). Rows with NaN in any
    array are dropped and counted; a non-positive variance is a
    :class:`~envlink.errors.ModelError`. Arrays are not copied unless rows must be
    dropped.

    Examples
    --------
    >>> import numpy as np
    >>> d = design_from_arrays([0.1, 0.2, np.nan], [0.1, 0.1, 0.1], None, intercept=True)
    >>> d.k, d.p, d.n_dropped
    (2, 1, 1)
    """
    dask_in = _is_dask(y) or _is_dask(v) or _is_dask(X)
    if dask_in:
        return _dask_design(y, v, X, intercept=intercept, groups=groups)
    names: list[str] | None = None
    if isinstance(X, pd.DataFrame):
        names = [str(c) for c in X.columns]
    y = np.asarray(y)
    v = np.asarray(v)
    if y.dtype.kind not in "fiu" or v.dtype.kind not in "fiu":
        raise InputError("y and v must be numeric arrays.")
    if y.ndim != 1 or v.shape != y.shape:
        raise InputError(f"y and v must be 1-D arrays of one length; got shapes {y.shape} and {v.shape}.")
    k = y.shape[0]
    X = np.zeros((k, 0)) if X is None else np.asarray(X)
    if X.ndim == 1:
        X = X[:, None]
    if X.shape[0] != k:
        raise InputError(f"X must have one row per effect ({k}); got {X.shape[0]} rows.")
    if X.dtype.kind not in "fiu":
        raise InputError("X must be a numeric matrix; use a formula for categorical moderators.")
    if y.dtype.kind in "iu":
        y = y.astype(np.float64)
    if v.dtype.kind in "iu":
        v = v.astype(np.float64)
    if X.dtype.kind in "iu":
        X = X.astype(np.float64)
    names = names or [f"x{j + 1}" for j in range(X.shape[1])]
    nan_rows: list[np.ndarray] = []
    for lo in range(0, k, _CHECK_BLOCK):  # boolean temporaries of block size only
        sl = slice(lo, lo + _CHECK_BLOCK)
        yb, vb, xb = y[sl], v[sl], X[sl]
        nan = np.isnan(yb) | np.isnan(vb)
        if X.shape[1]:
            nan |= np.isnan(xb).any(axis=1)
        if nan.any():
            nan_rows.append(np.flatnonzero(nan) + lo)
        badv = ~nan & ~((vb > 0) & np.isfinite(vb))
        if badv.any():
            i = int(np.flatnonzero(badv)[0])
            _check_variances(vb[i:i + 1], np.array([i + lo]), None, "v")
        bady = ~nan & ~np.isfinite(yb)
        if bady.any():
            i = int(np.flatnonzero(bady)[0])
            _check_finite(yb[i:i + 1], np.array([i + lo]), None, "y")
        if X.shape[1]:
            badx = ~nan & ~np.isfinite(xb).all(axis=1)
            if badx.any():
                rows = rows_text([int(np.flatnonzero(badx)[0]) + lo])
                raise InputError(f"Moderator matrix X is infinite in {rows}.")
    dropped = np.concatenate(nan_rows) if nan_rows else np.zeros(0, dtype=np.int64)
    labels = None
    keep = None
    gr = {r: np.asarray(g) for r, g in (groups or {}).items() if g is not None}
    for r, g in gr.items():
        if g.shape != (k,):
            raise InputError(f"{r}= must hold one label per effect ({k}); got shape {g.shape}.")
    if dropped.size:
        keep = np.ones(k, dtype=bool)
        keep[dropped] = False
        y, v, X = y[keep], v[keep], X[keep]
        labels = np.flatnonzero(keep)
        gr = {r: g[keep] for r, g in gr.items()}
    full = ([INTERCEPT] if intercept else []) + names
    return Design(y, v, X, intercept, full, labels, int(dropped.size), dropped.tolist(), None, gr,
                  keep, None)


def _dask_design(y: Any, v: Any, X: Any, *, intercept: bool,
                 groups: dict[str, Any] | None) -> Design:
    import dask
    import dask.array as da

    y = da.asarray(y)
    if y.ndim != 1:
        raise InputError(f"y must be 1-D; got shape {y.shape}.")
    v = da.asarray(v).rechunk(y.chunks)
    k = y.shape[0]
    X = da.zeros((k, 0), chunks=(y.chunks[0], 0)) if X is None else da.asarray(X)
    if X.ndim == 1:
        X = X[:, None]
    X = X.rechunk((y.chunks[0], X.shape[1]))
    nan = da.isnan(y) | da.isnan(v)
    if X.shape[1]:
        nan = nan | da.isnan(X).any(axis=1)
    badv = ~nan & ~(da.isfinite(v) & (v > 0))
    n_nan, n_bad = dask.compute(nan.sum(), badv.sum())
    if int(n_bad):
        i = int(da.argmax(badv).compute())
        raise ModelError(
            f"Sampling variance 'v' must be positive and finite; {rows_text([i])} has "
            f"{float(v[i].compute())!r} ({int(n_bad)} such row(s))."
        )
    names = [f"x{j + 1}" for j in range(X.shape[1])]
    full = ([INTERCEPT] if intercept else []) + names
    gr = {r: np.asarray(g) for r, g in (groups or {}).items() if g is not None}
    for r, g in gr.items():
        if g.shape != (k,):
            raise InputError(f"{r}= must hold one label per effect ({k}); got shape {g.shape}.")
    dropped: list[int] = []
    keep = labels = None
    if int(n_nan):
        keep = ~np.asarray(nan.compute())
        dropped = np.flatnonzero(~keep).tolist()
        labels = np.flatnonzero(keep)
        y, v, X = y[keep], v[keep], X[keep]
        y, v, X = (a.compute_chunk_sizes() for a in (y, v, X))
        gr = {r: g[keep] for r, g in gr.items()}
    return Design(y, v, X, intercept, full, labels, len(dropped), dropped, None, gr, keep, None)


def new_rows(design_spec: Any, newdata: Any, *, intercept: bool, m: int) -> np.ndarray:
    """Moderator rows (with the intercept column) for :meth:`MetaRegression.predict`."""
    if design_spec is not None:
        if not isinstance(newdata, pd.DataFrame):
            raise InputError("This model was fitted from a formula; pass predict() a DataFrame.")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("error")
                mm = design_spec.get_model_matrix(newdata, na_action="raise")
        except Exception as exc:  # formulaic raises several types and warnings
            raise InputError(f"Cannot build moderators for predict(): "
                             f"{_formula_problem(exc, None, intercept)}") from None
        cols = [str(c) for c in mm.columns]
        arr = np.asarray(mm, dtype=np.float64)
        if "Intercept" in cols:
            j = cols.index("Intercept")
            arr = np.column_stack([arr[:, j], np.delete(arr, j, axis=1)])
        return arr
    Xn = np.zeros((1, 0)) if newdata is None else np.asarray(newdata, dtype=np.float64)
    if Xn.ndim == 1:
        Xn = Xn[None, :] if m > 1 or Xn.shape[0] == 0 else Xn[:, None]
    if Xn.shape[1] != m:
        raise InputError(f"predict() needs {m} moderator column(s); got {Xn.shape[1]}.")
    if intercept:
        Xn = np.column_stack([np.ones(Xn.shape[0]), Xn])
    return Xn
