"""Reading user tables: CSV / TSV (sniffed delimiter, encodings told line by line), Parquet, Excel.

Errors name the file and the reason in words a table's author can act on (a line
with too many cells, an unclosed quote, two columns of one name).
"""

from __future__ import annotations

import csv
import io
import os
import re
import zipfile
from pathlib import Path

import pandas as pd

from envlink.errors import EnvlinkError, InputError
from envlink.tables.cells import cell_text
from envlink.tables.encoding import decode_table
from envlink.tables.header import header_names, without_extra_cells

__all__ = ["read_table", "read_table_as_written", "TABLE_SUFFIXES"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".pq", ".xlsx", ".xls")


def _typed_as_text(df: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame(
        {c: pd.array([cell_text(v) for v in df[c].tolist()], dtype="string") for c in df.columns},
        index=df.index,
        columns=df.columns,
    )


def _named(df: pd.DataFrame, names: list[str] | None) -> pd.DataFrame:
    """``df`` with the header names of :func:`~envlink.tables.header.header_names` (blank cells named)."""
    if names is None or len(names) != len(df.columns):
        return df
    return df.set_axis(names, axis=1)


def _reader_reason(exc: BaseException, suffix: str) -> str:
    """A typed reader's complaint, with what the file should have been."""
    if suffix in (".xlsx", ".xls"):
        return f"it is not an Excel workbook ({exc}); if it is a text table, give it the .csv extension."
    if suffix in (".parquet", ".pq"):
        return f"it is not a Parquet file ({exc}); if it is a text table, give it the .csv extension."
    return str(exc)


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
        The file. CSV text may be UTF-8 (with or without BOM), UTF-16 / UTF-32, or a
        legacy 8-bit encoding, even mixed line by line with UTF-8 (read by
        :func:`envlink.tables.encoding.decode_table`); the delimiter of ``.csv`` files
        is sniffed among ``,``, ``;`` and tab. A blank header cell names its column
        ``column_N`` (:mod:`envlink.tables.header`).
    as_text : bool, default False
        Read every cell as text, exactly as written (blank cells become ``""``), so
        that a stage can keep the user's columns unchanged. Cells of typed files
        (Parquet, Excel) become text through :func:`cell_text`; an Excel text cell
        stays as typed (``007``, ``NA``: no number or missing value is guessed from it).

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
            df = _named(df, header_names(list(df.columns), p))
            return _typed_as_text(df) if as_text else df
        if suffix in (".xlsx", ".xls"):
            header = pd.read_excel(p, header=None, nrows=1)
            names = header_names([] if header.empty else header.iloc[0].tolist(), p)
            if not as_text:
                return _named(pd.read_excel(p), names)
            # each cell as the workbook stores it (no number guessed from text, no "NA" read as missing)
            df = pd.read_excel(p, dtype=object, keep_default_na=False, na_filter=False)
            return _typed_as_text(_named(df, names))
        if suffix not in (".csv", ".tsv", ".txt"):
            raise InputError(
                f"Cannot read table {str(p)!r}: unknown extension {suffix!r}; "
                f"expected one of {', '.join(TABLE_SUFFIXES)}."
            )
        text = decode_table(p.read_bytes(), p)
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
        names = header_names(header, p)
        kwargs: dict[str, object] = {"sep": sep}
        if as_text:
            kwargs.update(dtype=str, keep_default_na=False, na_filter=False)
        df = pd.read_csv(io.StringIO(text), **kwargs)  # type: ignore[call-overload]
        if header and not isinstance(df.index, pd.RangeIndex):  # rows longer than the header
            df = without_extra_cells(pd.read_csv(io.StringIO(text), header=None, skiprows=1, **kwargs),
                                     header, p)
        return _named(df, names)
    except InputError:
        raise
    except pd.errors.ParserError as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {_parser_reason(str(exc))}") from exc
    except (PermissionError, FileNotFoundError, IsADirectoryError) as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {exc.strerror or exc}.") from exc
    except OSError as exc:  # the file is there and may be read: the reading itself failed
        raise EnvlinkError(f"Cannot read table {str(p)!r}: input/output error "
                           f"({exc.strerror or exc}); try again, or copy the file elsewhere.") from exc
    except (ValueError, ImportError, zipfile.BadZipFile) as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {_reader_reason(exc, suffix)}") from exc


def read_table_as_written(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a table keeping what the user wrote: text cells of CSV and Excel, typed cells of Parquet.

    CSV / TSV cells are read as text, exactly as written (see :func:`read_table`
    with ``as_text=True``). Excel cells are read as text too, each as
    :func:`cell_text` writes the value the workbook stores: a whole number without
    ``.0`` (``60``), other numbers in their shortest form (``-5.123456789012``), a
    date ``YYYY-MM-DD`` (``YYYY-MM-DDTHH:MM:SS`` when it has a time of day), a text
    cell exactly as typed (``007``, ``40``, ``NA``), an empty cell ``""``; so every
    command writes them the same way, and typed outputs type them as they type a
    CSV's columns. Parquet columns keep their stored types, so a table written back
    out has the same column types as the input. Stages that read text from cells
    (``locate``) turn typed cells into text with :func:`cell_text`.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("year,n\\n2001,007\\n")
    >>> read_table_as_written(p).to_dict("records")
    [{'year': '2001', 'n': '007'}]
    """
    suffix = Path(path).suffix.lower()
    return read_table(path, as_text=suffix in (".csv", ".tsv", ".txt", ".xlsx", ".xls"))
