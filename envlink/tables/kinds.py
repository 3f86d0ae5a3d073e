"""The kind of a table column (integer, number, boolean, date, text), and typed copies of text columns.

Tables read from CSV hold every cell as text, exactly as written. Typed outputs
(Parquet, Excel, GeoPackage, the Data Package descriptor) write a text column as the
kind every one of its cells parses as, so a column of ``12.5`` cells opens as numbers
where people read it; the CSV keeps the text. The rules, one per kind, from the first
that fits (blank cells are missing and do not count):

- ``integer``: every cell an optional ``-`` and digits without a leading zero
  (``007`` is a code, and stays text), of magnitude below 2**53 (longer digit strings
  are identifiers, kept exactly as text);
- ``number``: every cell a plain decimal number (``-0.5``, ``12.``, ``.5``,
  ``1.5e3``); no thousands separators, decimal commas, ``NaN`` or ``inf`` text;
- ``boolean``: every cell ``true``/``false``, ``True``/``False`` or ``TRUE``/``FALSE``
  (the Frictionless Table Schema's default spellings);
- ``date``: every cell an ISO 8601 calendar date ``YYYY-MM-DD`` that exists;
- ``string`` otherwise (and for a column with no cell at all).

Typed columns (numbers, booleans, datetimes) keep their own kind.

Examples
--------
>>> text_kind(["12", "", "-3"]), text_kind(["12.5", "3"]), text_kind(["007", "8"])
('integer', 'number', 'string')
>>> text_kind(["2001-03-01", None]), text_kind(["TRUE", "False"]), text_kind(["1,5"])
('date', 'boolean', 'string')
"""

from __future__ import annotations

import datetime as _dt
import math
import numbers
import re
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.tables.cells import cell_text

__all__ = ["KINDS", "text_kind", "column_kind", "typed_column", "typed_frame", "is_blank", "is_text_column"]

#: Column kinds, named as the Frictionless Table Schema names its field types.
KINDS = ("integer", "number", "boolean", "date", "string")

_INTEGER = re.compile(r"-?(?:0|[1-9][0-9]*)")
_NUMBER = re.compile(r"-?(?:0|[1-9][0-9]*)?(?:\.[0-9]*)?(?:[eE][-+]?[0-9]+)?")
_NUMBER_DIGIT = re.compile(r"[0-9]")
_DATE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")
_TRUE, _FALSE = ("true", "True", "TRUE"), ("false", "False", "FALSE")
_BIGGEST_EXACT = 2**53


def is_blank(v: Any) -> bool:
    """Whether a cell is missing: None, ``pd.NA``, ``pd.NaT``, a float NaN or blank text."""
    if v is None or v is pd.NA or v is pd.NaT:
        return True
    if isinstance(v, float):
        return math.isnan(v)
    return isinstance(v, str) and not v.strip()


def _is_integer(t: str) -> bool:
    return bool(_INTEGER.fullmatch(t)) and abs(int(t)) < _BIGGEST_EXACT


def _is_number(t: str) -> bool:
    if _INTEGER.fullmatch(t):  # a whole number too long for a float stays text (an identifier)
        return _is_integer(t)
    # a mantissa with at least one digit; a leading zero only before the point
    if not _NUMBER.fullmatch(t) or not _NUMBER_DIGIT.search(t.split("e")[0].split("E")[0]):
        return False
    whole = t.lstrip("-").split(".")[0].split("e")[0].split("E")[0]
    return not (len(whole) > 1 and whole.startswith("0"))


def _is_date(t: str) -> bool:
    if not _DATE.fullmatch(t):
        return False
    try:
        _dt.date.fromisoformat(t)
    except ValueError:
        return False
    return True


_TESTS = (
    ("integer", _is_integer),
    ("number", _is_number),
    ("boolean", lambda t: t in _TRUE or t in _FALSE),
    ("date", _is_date),
)


def text_kind(values: Iterable[Any]) -> str:
    """The kind every non-blank text cell of ``values`` parses as (see the module docstring).

    A cell that is not text (a number or date already) makes the column ``string``.
    """
    cells = [v for v in values if not is_blank(v)]
    if not cells or not all(isinstance(v, str) for v in cells):
        return "string"
    for kind, test in _TESTS:
        if test(cells[0]) and all(test(v) for v in cells):
            return kind
    return "string"


#: the tests of ``_TESTS`` as Arrow (RE2) patterns, for a column of text at once
_INTEGER_RE = r"^-?(?:0|[1-9][0-9]*)$"
_NUMBER_RE = r"^-?(?:(?:0|[1-9][0-9]*)(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?$"
_DATE_RE = r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$"


def is_text_column(s: pd.Series) -> bool:
    """Whether every cell of ``s`` is text or missing (a text dtype, or objects that are all str).

    Examples
    --------
    >>> is_text_column(pd.Series(["a", None])), is_text_column(pd.Series([1.5, "a"], dtype=object))
    (True, False)
    """
    return isinstance(s.dtype, pd.StringDtype) or (
        s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) in ("string", "empty"))


def _exact_integers(ints: Any) -> bool:
    """Whether every cell of an Arrow array of integer texts is below 2**53 in magnitude."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if len(ints) == 0:
        return True
    digits = pc.utf8_length(pc.utf8_ltrim(ints, "-")).to_numpy(zero_copy_only=False)
    if digits.max() < 16:  # below 10**15
        return True
    if digits.max() > 18:  # beyond what int64 holds, and far beyond 2**53
        return False
    return bool((np.abs(pc.cast(ints, pa.int64()).to_numpy(zero_copy_only=False)) < _BIGGEST_EXACT).all())


def _arrow_text_kind(s: pd.Series) -> str:
    """:func:`text_kind` of a column whose cells are all text or missing, with Arrow kernels.

    Blank cells (missing, or only white space as ``str.strip`` sees it) are dropped;
    the distinct texts decide which are blank, so the rule is Python's own.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    arr = pa.array(s, type=pa.string(), from_pandas=True)
    arr = arr.filter(arr.is_valid())
    if len(arr) == 0:
        return "string"
    maybe = pc.invert(pc.match_substring_regex(arr, "[0-9A-Za-z]"))  # a blank cell has neither
    spaces = [u for u in pc.unique(arr.filter(maybe)).to_pylist() if not u.strip()]
    if spaces:
        arr = arr.filter(pc.invert(pc.is_in(arr, pa.array(spaces, pa.string()))))
        if len(arr) == 0:
            return "string"

    def every(pattern: str) -> bool:
        return bool(pc.all(pc.match_substring_regex(arr, pattern)).as_py())

    if every(_INTEGER_RE):
        # an integer too long for a float is an identifier: neither integer nor number
        return "integer" if _exact_integers(arr) else "string"
    if every(_NUMBER_RE):
        return "number" if _exact_integers(arr.filter(pc.match_substring_regex(arr, _INTEGER_RE))) else "string"
    if bool(pc.all(pc.is_in(arr, pa.array([*_TRUE, *_FALSE], pa.string()))).as_py()):
        return "boolean"
    if every(_DATE_RE):
        return "date" if all(_is_date(t) for t in pc.unique(arr).to_pylist()) else "string"
    return "string"


def _text_column_kind(s: pd.Series) -> str:
    """:func:`text_kind` of a column of text cells: with Arrow where pyarrow is installed."""
    try:
        return _arrow_text_kind(s)
    except ImportError:  # pyarrow is an optional extra
        return text_kind(s.tolist())


def column_kind(s: pd.Series) -> str:
    """The kind of a column: from its dtype, or for text (object / string) columns from its cells.

    Examples
    --------
    >>> column_kind(pd.Series([1.5])), column_kind(pd.Series(["1", "2"])), column_kind(pd.Series([True]))
    ('number', 'integer', 'boolean')
    """
    dtype = s.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return "boolean"
    if pd.api.types.is_integer_dtype(dtype):
        return "integer"
    if pd.api.types.is_float_dtype(dtype):
        return "number"
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "date"
    if is_text_column(s):
        return _text_column_kind(s)
    cells = [v for v in s.tolist() if not is_blank(v)]
    if cells and all(isinstance(v, bool | np.bool_) for v in cells):
        return "boolean"
    if cells and all(isinstance(v, _dt.date) and not isinstance(v, _dt.datetime) for v in cells):
        return "date"
    if cells and all(isinstance(v, numbers.Real) and not isinstance(v, bool | np.bool_) for v in cells):
        return "integer" if all(isinstance(v, numbers.Integral) for v in cells) else "number"
    return text_kind(cells)


def _date(v: Any) -> _dt.date | None:
    if is_blank(v):
        return None
    if isinstance(v, _dt.datetime | pd.Timestamp):
        return v.date()
    if isinstance(v, _dt.date):
        return v
    return _dt.date.fromisoformat(str(v).strip()[:10])


def typed_column(s: pd.Series, kind: str) -> pd.Series:
    """``s`` as ``kind``: Int64, float64, boolean, dates (``datetime.date`` objects) or text.

    Blank cells become missing values (``<NA>``, NaN, None). Text cells must parse as
    the kind (use :func:`column_kind` first).

    Examples
    --------
    >>> typed_column(pd.Series(["3", "", "-4"]), "integer").tolist()
    [3, <NA>, -4]
    >>> typed_column(pd.Series(["2001-03-01", ""]), "date").tolist()
    [datetime.date(2001, 3, 1), None]
    """
    dtype = s.dtype
    if kind == "number" and pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
        return s.astype(np.float64)
    if kind == "integer" and pd.api.types.is_integer_dtype(dtype):
        return s.astype("Int64")
    values = s.tolist()
    if kind == "integer":
        out = pd.array([None if is_blank(v) else int(v) for v in values], dtype="Int64")
    elif kind == "number":
        out = np.array([np.nan if is_blank(v) else float(v) for v in values], dtype=np.float64)
    elif kind == "boolean":
        cells = [None if is_blank(v) else (v in _TRUE if isinstance(v, str) else bool(v)) for v in values]
        out = pd.array(cells, dtype="boolean")
    elif kind == "date":
        out = np.array([_date(v) for v in values], dtype=object)
    else:
        out = np.array([None if is_blank(v) else cell_text(v) for v in values], dtype=object)
    return pd.Series(out, index=s.index, name=s.name, dtype=object if kind in ("date", "string") else None)


def typed_frame(df: pd.DataFrame, columns: Sequence[Any] | None = None) -> pd.DataFrame:
    """A copy of ``df`` whose text columns (or those of ``columns``) are typed where they parse.

    Columns that are typed already, and text columns whose cells do not all parse as
    one kind, are left as they are. An object column whose cells are of one kind
    (numbers, booleans, dates) is typed as that kind; one that mixes kinds (numbers
    and text, as compiled spreadsheets hold them) becomes text, each cell as
    :func:`~envlink.tables.cells.cell_text` writes it and missing cells missing, so
    that every typed writer can store it.

    Examples
    --------
    >>> t = typed_frame(pd.DataFrame({"n": ["40", "41"], "code": ["007", "008"], "x": [0.5, 1.0]}))
    >>> str(t["n"].dtype), t["code"].tolist(), t["x"].tolist()
    ('Int64', ['007', '008'], [0.5, 1.0])
    >>> typed_frame(pd.DataFrame({"lat": [-3.1, "12°30'S", None, 60.0]}))["lat"].tolist()
    ['-3.1', "12°30'S", None, '60']
    """
    out = df.copy()
    for col in columns if columns is not None else df.columns:
        s = df[col]
        if is_text_column(s):
            kind = _text_column_kind(s)
            if kind != "string":
                out[col] = typed_column(s, kind)
        elif pd.api.types.is_object_dtype(s.dtype):
            kind = column_kind(s)
            if kind != "string":
                out[col] = typed_column(s, kind)
            elif not _all_datetimes(s):  # cells of several kinds: each as its text, missing kept
                out[col] = pd.Series([None if _missing(v) else cell_text(v) for v in s.tolist()],
                                     index=s.index, name=s.name, dtype=object)
    return out


def _missing(v: Any) -> bool:
    """Whether a cell is a missing value (None, NA, NaT, NaN); blank text is a value."""
    return v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and math.isnan(v))


def _all_datetimes(s: pd.Series) -> bool:
    """Whether every cell of an object column is a date-time (which typed writers store as such)."""
    cells = [v for v in s.tolist() if not _missing(v)]
    return bool(cells) and all(isinstance(v, _dt.datetime) for v in cells)
