"""Numbers and labels in the text cells of user tables, and checks that named columns exist.

Compiled tables write numbers as text (decimal commas, unicode minus signs,
full-width digits, words for "no value"); these helpers read them once, the same way
for every stage, and name the row and column of a cell that is not a number.
"""

from __future__ import annotations

import datetime as _dt
import math
import numbers
import re
import unicodedata
from collections.abc import Iterable
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink.core.util import INVISIBLE_CHARS, did_you_mean
from envlink.errors import InputError

__all__ = ["cell_text", "parse_numbers", "number_columns", "label_text", "require_columns", "MISSING_WORDS"]


def cell_text(value: Any) -> str:
    """One cell as text: ``""`` for an empty cell, whole floats without ``.0``.

    Typed tables (Parquet, Excel) store ``2001`` in a float column as ``2001.0`` and
    dates as timestamps; this gives the text a person would have written, so text
    readers (dates, coordinates) see ``"2001"`` and ``"2004-02-15"``.

    Examples
    --------
    >>> [cell_text(v) for v in (None, float("nan"), 2001.0, -8.25, 7, "Jan 2002")]
    ['', '', '2001', '-8.25', '7', 'Jan 2002']
    >>> cell_text(pd.Timestamp("2004-02-15"))
    '2004-02-15'
    """
    if value is None or value is pd.NaT:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        v = float(value)
        if math.isnan(v):
            return ""
        if v.is_integer() and abs(v) < 1e15:
            return str(int(v))
        return repr(v)
    if isinstance(value, _dt.datetime):
        if (value.hour, value.minute, value.second, value.microsecond) == (0, 0, 0, 0):
            return value.date().isoformat()
        return value.isoformat()
    if isinstance(value, _dt.date):
        return value.isoformat()
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value)


_MINUS = dict.fromkeys(map(ord, "\u2212\u2010\u2011\u2012\u2013\ufe63\uff0d"), "-")
#: cell texts that mean "no value" in compiled tables (common practice)
MISSING_WORDS = ("nan", "na", "n/a", "none", "null", "-", "--", "?")


def _normalised(value: Any) -> str:
    """One cell's text as :func:`parse_numbers` reads it (NFKC, no invisible characters,
    minus look-alikes as ``-``, stripped); plain ASCII text only needs the strip."""
    v = value if isinstance(value, str) else cell_text(value)
    if v.isascii():
        return v.strip()
    return unicodedata.normalize("NFKC", v).translate(INVISIBLE_CHARS).translate(_MINUS).strip()


def parse_numbers(values: pd.Series) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """A column as float64, and which non-blank cells could not be read as a number.

    Text is NFKC-normalised (full-width digits, no-break spaces), stripped of
    invisible characters, and minus look-alikes become ``-``. A column with no number
    written with a ``.`` whose comma numbers do not all have three digits after the comma (so
    cannot be thousands separators) is read with decimal commas, as semicolon CSVs
    write them (``12,5``). Blank cells and the words of :data:`MISSING_WORDS` are
    missing (NaN, not unreadable).

    The column is read at once (pandas' own number parsing); only the cells it does
    not read as a number (blank, words, decimal commas, text) are looked at one by one.

    Examples
    --------
    >>> v, bad = parse_numbers(pd.Series(["12,5", "", "\uff13", "n/a", "abc"]))
    >>> v.tolist(), bad.tolist()
    ([12.5, nan, 3.0, nan, nan], [False, False, False, False, True])
    """
    if pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values):
        out = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        return out, np.zeros(len(values), dtype=bool)
    text = np.array([_normalised(v) for v in values.tolist()], dtype=object)
    out = np.array(pd.to_numeric(pd.Series(text, dtype=object), errors="coerce"), dtype=np.float64)
    rest = np.flatnonzero(np.isnan(out) & (text != ""))  # words, decimal commas, text: one by one
    if rest.size:
        words = {w for w in MISSING_WORDS}
        for i in rest:
            if text[i].lower() in words:
                text[i] = ""
        rest = rest[text[rest] != ""]
    if rest.size:
        comma = np.array([_COMMA.fullmatch(t) is not None for t in text[rest]], dtype=bool)
        # a '.' in a word ('approx. 5') says nothing about how the numbers are written
        read = np.flatnonzero(~np.isnan(out))
        dotted = any("." in t for t in text[read])
        if comma.any() and not dotted:
            if any(len(t.rsplit(",", 1)[-1]) != 3 for t in text[rest[comma]]):
                text[rest] = [t.replace(",", ".") for t in text[rest]]
                out[rest] = np.array(pd.to_numeric(pd.Series(text[rest], dtype=object), errors="coerce"),
                                     dtype=np.float64)
    unreadable = (text != "") & np.isnan(out)
    return out, unreadable


_COMMA = re.compile(r"[+-]?\d*,\d+")


def number_columns(
    table: pd.DataFrame,
    columns: Iterable[str],
    *,
    numbers: Iterable[str] = (),
    where: str = "",
    hint: str = "",
) -> dict[str, NDArray[np.float64]]:
    """The columns of ``columns`` that hold numbers, as float64 (read by :func:`parse_numbers`).

    A column in ``numbers`` must hold numbers; any other column holds numbers when
    at least one of its cells is one (a column of words is left out: text, e.g. a
    category). Numbers written as text are read (decimal commas, unicode minus,
    full-width digits); blank cells and :data:`MISSING_WORDS` are NaN. A cell that
    is then not a number is an :class:`InputError` naming the column, the rows
    (counted from 1, the first data row is row 1) and the values, rather than the
    column silently becoming text with one level per value.

    Parameters
    ----------
    table : pandas.DataFrame
    columns : iterable of str
        The columns to read (each once, in order).
    numbers : iterable of str
        Columns that must hold numbers even when no cell is one.
    where : str
        Start of the error message (e.g. the option or line being read), without
        the final ``": "``.
    hint : str
        What else the user can do for a column outside ``numbers``, appended to the
        error with ``{col}`` replaced by the column name (e.g. ``"write C({col}) if
        the column is a category"``).

    Examples
    --------
    >>> t = pd.DataFrame({"depth": ["9,5", "12", ""], "zone": ["reef", "flat", "reef"]})
    >>> {k: v.tolist() for k, v in number_columns(t, ["depth", "zone"]).items()}
    {'depth': [9.5, 12.0, nan]}
    >>> t.loc[1, "depth"] = "approx. 5"
    >>> number_columns(t, ["depth"], where="--moderators")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: --moderators: the column 'depth' holds numbers, but row 2 'approx. 5' is not a number. Write a number or leave the cell blank.
    """
    must = set(numbers)
    out: dict[str, NDArray[np.float64]] = {}
    for col in dict.fromkeys(columns):
        values, unreadable = parse_numbers(table[col])
        if col not in must and not np.isfinite(values).any():
            continue  # text: a category or a label
        if unreadable.any():
            rows = np.flatnonzero(unreadable)
            shown = ", ".join(f"row {i + 1} {cell_text(table[col].iloc[i])!r}" for i in rows[:5])
            more = f" and {rows.size - 5} more" if rows.size > 5 else ""
            verb = "is" if rows.size == 1 else "are"
            what = "must hold numbers" if col in must else "holds numbers"
            extra = f"; {hint.replace('{col}', str(col))}" if hint and col not in must else ""
            raise InputError(
                f"{where + ': ' if where else ''}the column {col!r} {what}, but {shown}{more} "
                f"{verb} not a number{_mixed_marks(table[col], rows)}. Write a number or leave the "
                f"cell blank{extra}."
            )
        out[col] = values
    return out


_COMMA_DECIMAL = re.compile(r"^[-+\u2212]?\d+,\d+$")
_POINT_DECIMAL = re.compile(r"^[-+\u2212]?\d*\.\d+$")


def _mixed_marks(values: pd.Series, bad: NDArray[np.intp]) -> str:
    """Why a decimal comma was not read: other cells of the column use a decimal point."""
    if not any(_COMMA_DECIMAL.match(cell_text(values.iloc[i]).strip()) for i in bad[:5]):
        return ""
    if not any(_POINT_DECIMAL.match(cell_text(v).strip()) for v in values.tolist()):
        return ""
    return (" (other cells of the column write decimals with a point, so a comma there is "
            "not read as a decimal mark: write one mark throughout)")


def label_text(values: pd.Series) -> pd.Series:
    """Text cells as labels (categories, study names), so that white space is not a label.

    Each run of white space becomes one space, invisible characters are removed and
    blank cells are missing (``None``): ``" reef "`` and ``"reef"`` are one label
    and a blank cell is no label at all. Columns that are not text (numbers of a typed file) are returned unchanged.

    Examples
    --------
    >>> label_text(pd.Series(["reef  flat", " reef flat\u200b", "", "lagoon"])).tolist()
    ['reef flat', 'reef flat', None, 'lagoon']
    """
    if not (pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values)):
        return values

    def one(v: Any) -> Any:
        if not isinstance(v, str):
            return None if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)) else v
        t = _WHITE.sub(" ", v.translate(INVISIBLE_CHARS)).strip()
        return t or None
    return pd.Series([one(v) for v in values.tolist()], index=values.index, dtype=object, name=values.name)


_WHITE = re.compile(r"\s+")


def require_columns(df: pd.DataFrame, columns: Iterable[str | None], *, what: str = "table") -> None:
    """Raise :class:`InputError` naming the first missing column, with a did-you-mean.

    Examples
    --------
    >>> import pandas as pd
    >>> require_columns(pd.DataFrame({"latitude": [1]}), ["latitud"])
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The table has no column 'latitud'. Did you mean 'latitude'? Columns: 'latitude'.
    """
    have = [str(c) for c in df.columns]
    for col in columns:
        if col is not None and not have:
            raise InputError(
                f"The {what} has no column {col!r}: it has no columns at all (an empty file or "
                "sheet? Excel tables are read from the first sheet)."
            )
        if col is not None and col not in have:
            listing = ", ".join(repr(c) for c in have[:20])
            head = "Columns" if len(have) <= 20 else f"The first 20 of its {len(have)} columns"
            raise InputError(
                f"The {what} has no column {col!r}.{did_you_mean(col, have)} {head}: {listing}."
            )
