"""Reading and writing user tables (CSV, TSV, Parquet, Excel) with clear errors.

Every stage meets the outside world through these two functions, so encodings,
extensions and atomic writes are handled once.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import math
import numbers
import os
import re
import unicodedata
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from envlink._util import INVISIBLE_CHARS, atomic_path, did_you_mean, probe_writable
from envlink.errors import InputError

__all__ = [
    "read_table",
    "read_table_as_written",
    "write_table",
    "check_output_path",
    "require_columns",
    "cell_text",
    "parse_numbers",
    "number_columns",
    "label_text",
    "MISSING_WORDS",
    "TABLE_SUFFIXES",
]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".pq", ".xlsx", ".xls")


def _decode(raw: bytes, path: Path) -> str:
    if raw.startswith(b"\xef\xbb\xbf"):
        return raw[3:].decode("utf-8")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        # Latin-1 maps every byte, so it is the fallback for legacy spreadsheets.
        return raw.decode("latin-1")


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


def _typed_as_text(df: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame(
        {c: pd.array([cell_text(v) for v in df[c].tolist()], dtype="string") for c in df.columns},
        index=df.index,
        columns=df.columns,
    )


def _check_header(names: Sequence[object], p: Path) -> None:
    seen: dict[str, int] = {}
    for i, name in enumerate(names, start=1):
        key = cell_text(name)
        if not key.strip():  # blank header cells get distinct 'Unnamed: N' names from pandas
            continue
        if key in seen:
            raise InputError(
                f"Cannot read table {str(p)!r}: columns {seen[key]} and {i} are both named "
                f"{key!r}; every column needs its own name, so rename one of them."
            )
        seen[key] = i


def _parser_reason(message: str) -> str:
    """The CSV parser's complaint in words a table's author can act on."""
    m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if m:
        want, line, saw = m.groups()
        return (
            f"line {line} has {saw} cells but the header has {want}. A cell holding the "
            "delimiter must be in double quotes; a comma-separated file cannot hold decimal "
            "commas unquoted (write -8.5, or separate the columns with ';')."
        )
    m = re.search(r"EOF inside string starting at row (\d+)", message)
    if m:
        return (
            f"a double quote opened on line {int(m.group(1)) + 1} is never closed; "
            "close it, or remove the stray quote."
        )
    return message.strip()


def read_table(path: str | os.PathLike[str], *, as_text: bool = False) -> pd.DataFrame:
    """Read a CSV / TSV / Parquet / Excel table.

    Parameters
    ----------
    path : path-like
        The file. CSV may be UTF-8 (with or without BOM) or Latin-1; the delimiter
        of ``.csv`` files is sniffed among ``,``, ``;`` and tab.
    as_text : bool, default False
        Read every cell as text, exactly as written (blank cells become ``""``), so
        that a stage can keep the user's columns unchanged. Cells of typed files
        (Parquet, Excel) become text through :func:`cell_text`.

    Returns
    -------
    pandas.DataFrame

    Raises
    ------
    InputError
        The file is missing, empty, unreadable, of an unknown type, or has two
        columns of the same name; the message names the path and the reason.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("a;b\\n1,5;x\\n")
    >>> read_table(p, as_text=True).to_dict("records")
    [{'a': '1,5', 'b': 'x'}]
    """
    p = Path(path)
    if not p.exists():
        raise InputError(f"Cannot read table {str(p)!r}: no such file.")
    if p.is_dir():
        raise InputError(f"Cannot read table {str(p)!r}: it is a directory, not a file.")
    suffix = p.suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            df = pd.read_parquet(p)
            _check_header(list(df.columns), p)
            return _typed_as_text(df) if as_text else df
        if suffix in (".xlsx", ".xls"):
            header = pd.read_excel(p, header=None, nrows=1)
            _check_header([] if header.empty else header.iloc[0].tolist(), p)
            df = pd.read_excel(p)
            return _typed_as_text(df) if as_text else df
        if suffix not in (".csv", ".tsv", ".txt"):
            raise InputError(
                f"Cannot read table {str(p)!r}: unknown extension {suffix!r}; "
                f"expected one of {', '.join(TABLE_SUFFIXES)}."
            )
        text = _decode(p.read_bytes(), p)
        if not text.strip():
            raise InputError(
                f"Cannot read table {str(p)!r}: the file is empty; expected a header row "
                "with the column names, then one row per line."
            )
        first = re.split(r"\r\n|\r|\n", text, maxsplit=1)[0]
        if suffix == ".tsv" or "\t" in first:
            sep = "\t"
        elif first.count(";") > first.count(","):
            sep = ";"
        else:
            sep = ","
        try:
            header = next(csv.reader([first], delimiter=sep), [])
        except csv.Error:  # an odd first line: pandas' own reading reports it
            header = []
        _check_header(header, p)
        kwargs: dict[str, object] = {"sep": sep}
        if as_text:
            kwargs.update(dtype=str, keep_default_na=False, na_filter=False)
        return pd.read_csv(io.StringIO(text), **kwargs)  # type: ignore[call-overload]
    except InputError:
        raise
    except pd.errors.ParserError as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {_parser_reason(str(exc))}") from exc
    except (OSError, ValueError, ImportError) as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {exc}") from exc


def read_table_as_written(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a table keeping what the user wrote: text cells of CSV, typed cells of Parquet / Excel.

    CSV / TSV cells are read as text, exactly as written (see :func:`read_table`
    with ``as_text=True``); Parquet and Excel columns keep their stored types, so a
    table written back out has the same column types as the input. Stages that read
    text from cells (``locate``) turn typed cells into text with :func:`cell_text`.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("year,n\\n2001,007\\n")
    >>> read_table_as_written(p).to_dict("records")
    [{'year': '2001', 'n': '007'}]
    """
    suffix = Path(path).suffix.lower()
    return read_table(path, as_text=suffix in (".csv", ".tsv", ".txt"))


def check_output_path(path: str | os.PathLike[str], *, force: bool = False,
                      suffixes: Sequence[str] | None = None) -> Path:
    """Check, before any work, that a table (or another file) can be written at ``path``.

    Raises :class:`InputError` for an unknown extension, a path that is a folder,
    an existing file without ``force``, or a folder where no file can be created.
    ``suffixes`` are the extensions allowed (default: the table formats
    :func:`write_table` writes), e.g. ``(".json",)`` for a JSON result.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> check_output_path(d)
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Cannot write ... it is a folder; give a file name inside it, e.g. ....csv'.
    >>> check_output_path(d / "fit.txt", suffixes=(".json",))
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Cannot write ...fit.txt': unknown extension '.txt'; expected .json.
    """
    p = Path(path)
    allowed = tuple(s.lower() for s in suffixes) if suffixes is not None else _WRITABLE
    example = "table.csv" if suffixes is None else f"result{allowed[0]}"
    if p.is_dir():
        raise InputError(
            f"Cannot write {str(p)!r}: it is a folder; give a file name inside it, "
            f"e.g. {str(p / example)!r}."
        )
    if p.suffix.lower() not in allowed:
        expected = "; expected .csv, .tsv, .parquet or .xlsx." if suffixes is None else (
            "; expected " + " or ".join(allowed) + ".")
        what = f"unknown extension {p.suffix!r}" if p.suffix else "no extension"
        raise InputError(f"Cannot write {str(p)!r}: {what}{expected}")
    if p.exists() and not force:
        raise InputError(f"{str(p)!r} exists; pass --force to overwrite it.")
    folder = p.parent
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    try:  # a read-only or missing location is found before any work is done
        probe_writable(folder)
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise InputError(f"Cannot write {str(p)!r}: cannot create a file in {str(folder)!r} ({reason}).") from exc
    return p


#: Control characters an Excel worksheet cannot store (XML 1.0 forbids them).
_EXCEL_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")


def _check_excel_text(df: pd.DataFrame, p: Path) -> None:
    for col in df.columns:
        values = df[col]
        if not (pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values)):
            continue
        for i, v in enumerate(values.tolist()):
            if isinstance(v, str) and (m := _EXCEL_ILLEGAL.search(v)):
                raise InputError(
                    f"Cannot write table {str(p)!r}: row {i + 1}, column {str(col)!r} holds the "
                    f"control character U+{ord(m.group()):04X}, which Excel files cannot store; "
                    "remove it from the input, or write .csv, .tsv or .parquet instead."
                )


def _os_reason(exc: OSError, p: Path) -> str:
    """An OSError in words, without the temporary file's name."""
    reason = exc.strerror or str(exc)
    return f"cannot create a file in {str(p.parent) or '.'!r} ({reason})"


_WRITABLE = (".csv", ".tsv", ".parquet", ".pq", ".xlsx")


def write_table(df: pd.DataFrame, path: str | os.PathLike[str], *, force: bool = True) -> Path:
    """Write ``df`` atomically, choosing the format from the extension.

    Parameters
    ----------
    df : pandas.DataFrame
    path : path-like
        ``.csv``, ``.tsv``, ``.parquet`` / ``.pq`` or ``.xlsx``.
    force : bool, default True
        When False, an existing file is an :class:`InputError`.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    p = check_output_path(path, force=force)
    suffix = p.suffix.lower()
    if suffix == ".xlsx":
        _check_excel_text(df, p)
    try:
        with atomic_path(p) as tmp:
            if suffix == ".csv":
                df.to_csv(tmp, index=False)
            elif suffix == ".tsv":
                df.to_csv(tmp, index=False, sep="\t")
            elif suffix in (".parquet", ".pq"):
                df.to_parquet(tmp, index=False)
            else:
                df.to_excel(tmp, index=False)
    except OSError as exc:
        raise InputError(f"Cannot write table {str(p)!r}: {_os_reason(exc, p)}.") from exc
    except ImportError as exc:
        raise InputError(f"Cannot write table {str(p)!r}: {exc}") from exc
    return p


_MINUS = dict.fromkeys(map(ord, "\u2212\u2010\u2011\u2012\u2013\ufe63\uff0d"), "-")
#: cell texts that mean "no value" in compiled tables (common practice)
MISSING_WORDS = ("nan", "na", "n/a", "none", "null", "-", "--", "?")


def parse_numbers(values: pd.Series) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """A column as float64, and which non-blank cells could not be read as a number.

    Text is NFKC-normalised (full-width digits, no-break spaces), stripped of
    invisible characters, and minus look-alikes become ``-``. A column with no number
    written with a ``.`` whose comma numbers do not all have three digits after the comma (so
    cannot be thousands separators) is read with decimal commas, as semicolon CSVs
    write them (``12,5``). Blank cells and the words of :data:`MISSING_WORDS` are
    missing (NaN, not unreadable).

    Examples
    --------
    >>> v, bad = parse_numbers(pd.Series(["12,5", "", "\uff13", "n/a", "abc"]))
    >>> v.tolist(), bad.tolist()
    ([12.5, nan, 3.0, nan, nan], [False, False, False, False, True])
    """
    if pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values):
        out = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        return out, np.zeros(len(values), dtype=bool)
    text = pd.Series([cell_text(v) for v in values.tolist()], index=values.index, dtype="string")
    text = text.map(lambda v: unicodedata.normalize("NFKC", v).translate(INVISIBLE_CHARS).translate(_MINUS).strip())
    text = text.where(~text.str.lower().isin(MISSING_WORDS), "")
    comma = text.str.fullmatch(r"[+-]?\d*,\d+")
    # a '.' in a word ('approx. 5') says nothing about how the numbers are written
    dotted = text.str.contains(".", regex=False) & pd.to_numeric(text.where(text != "", None), errors="coerce").notna()
    if comma.any() and not dotted.any():
        decimals = text[comma].str.split(",").str[-1].str.len()
        if (decimals != 3).any():
            text = text.str.replace(",", ".", regex=False)
    number = pd.to_numeric(text.where(text != "", None), errors="coerce")
    out = number.to_numpy(dtype=np.float64, na_value=np.nan)
    unreadable = (text != "").to_numpy(dtype=bool) & np.isnan(out)
    return out, unreadable


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
                f"{verb} not a number. Write a number or leave the cell blank{extra}."
            )
        out[col] = values
    return out


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
            raise InputError(
                f"The {what} has no column {col!r}.{did_you_mean(col, have)} Columns: {listing}."
            )
