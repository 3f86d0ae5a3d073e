"""A design straight from numeric columns: the fast path of ``envlink fit`` for big tables.

A table of millions of rows whose moderators are a plain sum of numeric columns
(``"x1 + x2"``) needs no formula machinery and no pandas: the columns are read into
float64 arrays (:func:`envlink.tables.numeric.read_numeric_columns`) and the rows
are chosen by the rules of :func:`~envlink.metareg.frame.model_frame` (a row with a
missing or non-finite effect, variance or moderator is left out and reported; a
finite variance that is not positive is an error naming the row). The fit, its
notes and its numbers are those of the ordinary path; anything else (formulas with
functions or categories, label columns, a ``locate_status`` column, small tables)
goes the ordinary way.
"""

from __future__ import annotations

import keyword
import os
import re
from pathlib import Path

import numpy as np

from envlink.metareg.design import INTERCEPT, Design, check_variances

__all__ = ["plain_terms", "design_from_columns", "design_from_table_file", "FAST_MIN_ROWS"]

#: tables with fewer rows (Parquet) or fewer bytes than this many rows' worth (CSV, at
#: 64 bytes a row) take the ordinary path
FAST_MIN_ROWS = 1 << 16

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_STATUS = "locate_status"


def plain_terms(moderators: str | None) -> list[str] | None:
    """The columns of a formula that is a plain sum of column names, else None.

    Examples
    --------
    >>> plain_terms("x1 + x2"), plain_terms(None), plain_terms("C(zone) + x"), plain_terms("x - 1")
    (['x1', 'x2'], [], None, None)
    """
    if moderators is None or not moderators.strip():
        return []
    parts = [s.strip() for s in moderators.split("+")]
    if any(not _NAME.fullmatch(s) or keyword.iskeyword(s) or s.lower() == INTERCEPT
           for s in parts) or len(set(parts)) < len(parts):
        return None
    return parts


def design_from_columns(y: np.ndarray, v: np.ndarray, X: np.ndarray, names: list[str], *,
                        variance: str = "variance") -> Design:
    """A :class:`Design` (with intercept) from float64 columns, by the model frame's row rules.

    Examples
    --------
    >>> d = design_from_columns(np.array([0.1, np.nan, 0.3]), np.array([0.01, 0.02, 0.03]),
    ...                         np.array([[1.0], [2.0], [3.0]]), ["x"])
    >>> d.k, d.names, d.dropped_labels
    (2, ['intercept', 'x'], [1])
    """
    lack = ~np.isfinite(y)
    lack |= ~np.isfinite(v)
    for j in range(X.shape[1]):
        lack |= ~np.isfinite(X[:, j])
    keep = ~lack
    del lack
    if keep.all():
        rows = None
        check_variances(v, range(v.shape[0]), None, variance)  # type: ignore[arg-type]
    else:
        rows = np.flatnonzero(keep)
        y, v, X = y[keep], v[keep], X[keep]
        check_variances(v, rows, None, variance)
    dropped = np.flatnonzero(~keep).tolist()
    return Design(y, v, X, True, [INTERCEPT, *names], rows, len(dropped), dropped, None, {},
                  keep, None)


def design_from_table_file(path: str | os.PathLike[str], *, effect: str, variance: str,
                           moderators: str | None) -> Design | None:
    """The design of a big table of plain numbers read straight into arrays, or None.

    None means: take the ordinary path (read the table, then
    :func:`~envlink.metareg.frame.model_frame`), which gives the same fit for tables
    this function accepts and the usual messages for the others.
    """
    from envlink.tables.numeric import read_numeric_columns, table_rows

    terms = plain_terms(moderators)
    p = Path(path)
    if terms is None or not p.is_file() or effect == variance or {effect, variance} & set(terms):
        return None
    rows = table_rows(p)
    small = rows < FAST_MIN_ROWS if rows is not None else p.stat().st_size < 64 * FAST_MIN_ROWS
    if small:
        return None
    cols = read_numeric_columns(p, [effect, variance], terms)
    if cols is None or _STATUS in cols.names:  # rows rejected by locate: the ordinary rule
        return None
    return design_from_columns(cols.vectors[effect], cols.vectors[variance], cols.matrix,
                               terms, variance=variance)
