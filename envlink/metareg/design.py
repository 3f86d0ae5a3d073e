"""Design matrices for the meta-regression: formulas through formulaic, or plain arrays.

The design keeps the moderator columns apart from the intercept (which the sums
imply), so a huge array given by the user is never copied to add a column of ones.
A table's rows are chosen by the model frame (:mod:`envlink.metareg.frame`); array
rows with a missing effect, variance or moderator are dropped, counted and named, and
a non-positive or infinite variance is an error naming the row.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from envlink.errors import InputError, InvalidValueError, ModelError
from envlink.metareg.degenerate import check_magnitudes
from envlink.metareg.formula import (
    INTERCEPT,
    _py,
    category_columns,
    formula_problem,
    formula_text,
    formula_variables,
    rows_text,
)

if TYPE_CHECKING:
    from envlink.metareg.frame import ModelFrame

__all__ = ["Design", "design_from_frame", "design_from_arrays", "new_rows", "check_variances",
           "check_effects", "INTERCEPT", "formula_variables", "category_columns", "rows_text"]

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
    drop_reason: str = "missing effect, variance or moderator values"

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


def design_from_frame(frame: ModelFrame, *, intercept: bool = True) -> Design:
    """Build a :class:`Design` from a :class:`~envlink.metareg.frame.ModelFrame` (formulaic).

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.frame import model_frame
    >>> df = pd.DataFrame({"e": [0.1, 0.3, None, 0.2], "v": [0.01, 0.02, 0.01, 0.03],
    ...                    "x": [1.0, 2.0, 3.0, 4.0]})
    >>> d = design_from_frame(model_frame(df, effect="e", variance="v", moderators="x"))
    >>> d.k, d.names, d.n_dropped
    (3, ['intercept', 'x'], 1)
    """
    from formulaic import model_matrix
    from formulaic.errors import FormulaicError

    moderators = frame.moderators
    sub = frame.data
    keep = frame.included
    index = frame.index if frame.index is not None else np.arange(keep.shape[0])
    rows = np.flatnonzero(keep)  # input positions of the kept rows
    try:  # formulaic evaluates the user's Python: whatever it raises is the formula's fault
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            mm = model_matrix(formula_text(moderators, intercept), sub, na_action="raise")
            cols = [str(c) for c in mm.columns]
            Xdf = pd.DataFrame(np.asarray(mm, dtype=np.float64), columns=cols)
    except (FormulaicError, Warning) as exc:
        raise InputError(f"Cannot build the moderators from {moderators!r}: "
                         f"{formula_problem(exc, moderators, intercept)}") from None
    except Exception as exc:  # noqa: BLE001 - e.g. I(x.__class__), a bad Treatment() level
        raise InputError(f"Cannot build the moderators from {moderators!r}: "
                         f"{type(exc).__name__}: {formula_problem(exc, moderators, intercept)}") from None
    has_int = "Intercept" in cols
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
    groups = {role: sub[col].to_numpy() for role, col in frame.groups.items()}
    y = sub[frame.effect].to_numpy(dtype=np.float64)
    v = sub[frame.variance].to_numpy(dtype=np.float64)
    d = Design(y, v, X, has_int, names, index[keep], len(dropped), dropped, mm.model_spec,
               groups, keep, index, frame.reason())
    check_magnitudes(d, frame.effect, frame.variance)  # overflows named before any fitting
    return d


def check_variances(v: np.ndarray, rows: np.ndarray, index: Any, name: str) -> None:
    """Refuse a sampling variance that is zero, negative or infinite, naming its row."""
    bad = ~(np.isfinite(v) & (v > 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InvalidValueError(
            f"Sampling variance {name!r} must be positive and finite; {rows_text([rows[i]], index)} "
            f"has {float(v[i])!r} ({int(bad.sum())} such row(s)). Fix or remove these rows; a zero "
            "variance usually means a zero cell that needs a continuity correction."
        )


def check_effects(y: np.ndarray, rows: np.ndarray, index: Any, name: str) -> None:
    """Refuse an infinite effect, naming its row (a missing one is left out before)."""
    bad = ~np.isfinite(y)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InvalidValueError(
            f"Effect {name!r} must be finite; {rows_text([rows[i]], index)} has {float(y[i])!r} "
            f"({int(bad.sum())} such row(s)). Fix or remove these rows; a blank effect is left "
            "out of the fit."
        )


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
            check_variances(vb[i:i + 1], np.array([i + lo]), None, "v")
        bady = ~nan & ~np.isfinite(yb)
        if bady.any():
            i = int(np.flatnonzero(bady)[0])
            check_effects(yb[i:i + 1], np.array([i + lo]), None, "y")
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
    d = Design(y, v, X, intercept, full, labels, int(dropped.size), dropped.tolist(), None, gr,
               keep, None)
    check_magnitudes(d)  # overflows named before any fitting
    return d


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
                             f"{formula_problem(exc, None, intercept)}") from None
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
