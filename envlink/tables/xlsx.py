"""The one way envlink writes an Excel sheet: typed cells, and text that is never a formula.

Every ``.xlsx`` envlink writes (:func:`envlink.tables.write_table` for ``envlink
sites`` / ``attach`` / ``effects`` / ``scan`` / ``fit``, and the ``xlsx`` export format
of ``envlink run``) is written by openpyxl in write-only mode through
:func:`append_table`:

- numbers are number cells (a NaN is an empty cell; ``inf`` / ``-inf`` are text, as
  the CSV writes them), integers and booleans number and TRUE/FALSE cells;
- dates are date cells shown ``yyyy-mm-dd``, date-times ``yyyy-mm-dd hh:mm:ss``;
- text is a text cell, exactly as written: a text starting with ``=`` is stored as
  text, never as a formula (openpyxl would store it as one), so a cell ``=1+1`` or
  ``=HYPERLINK(...)`` in an input table opens as the characters written;
- missing values are empty cells.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
from collections.abc import Iterable, Iterator, Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.errors import InputError
from envlink.tables.cells import cell_text
from envlink.tables.kinds import column_kind, is_text_column

__all__ = ["EXCEL_MAX_ROWS", "append_table", "text_row", "text_cell", "frame_columns", "write_xlsx_table"]

#: The rows of a worksheet, the header included (Excel's specifications and limits).
EXCEL_MAX_ROWS = 1_048_576
DATE_FORMAT = "yyyy-mm-dd"
DATETIME_FORMAT = "yyyy-mm-dd hh:mm:ss"

#: A sheet's columns: (header, kind, values), kind one of integer, number, boolean, date,
#: datetime, string.
Columns = Sequence[tuple[str, str, pd.Series]]


def text_cell(ws: Any, value: str) -> Any:
    """``value`` as a cell of ``ws`` that is text whatever it starts with (never a formula).

    Examples
    --------
    >>> from openpyxl import Workbook
    >>> ws = Workbook(write_only=True).create_sheet("t")
    >>> text_cell(ws, "=1+1").data_type, text_cell(ws, "x")
    ('s', 'x')
    """
    from openpyxl.cell import WriteOnlyCell

    if not value.startswith("="):
        return value
    cell = WriteOnlyCell(ws, value=value)
    cell.data_type = "s"  # openpyxl makes a text starting with "=" a formula ("f")
    return cell


def text_row(ws: Any, values: Iterable[Any], *, bold: bool = False) -> list[Any]:
    """A row of plain values for ``ws``: text as text cells (:func:`text_cell`), bold if asked.

    Examples
    --------
    >>> from openpyxl import Workbook
    >>> ws = Workbook(write_only=True).create_sheet("t")
    >>> [c if isinstance(c, str | None) else c.data_type for c in text_row(ws, ["a", "=b", None])]
    ['a', 's', None]
    """
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.styles import Font

    if not bold:
        return [text_cell(ws, v) if isinstance(v, str) else v for v in values]
    cells = []
    for v in values:
        cell = WriteOnlyCell(ws, value=v)
        if isinstance(v, str):
            cell.data_type = "s"
        cell.font = Font(bold=True)
        cells.append(cell)
    return cells


def _missing(v: Any) -> bool:
    return v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and math.isnan(v))


def _values(kind: str, s: pd.Series) -> list[Any]:
    """The cells of one column as Python values (None where missing)."""
    if kind == "number":
        v = s.to_numpy(dtype=np.float64, na_value=np.nan)
        return [None if math.isnan(x) else (float(x) if math.isfinite(x) else ("inf" if x > 0 else "-inf"))
                for x in v.tolist()]
    if kind == "integer":
        return [None if _missing(x) else int(x) for x in s.tolist()]
    if kind == "boolean":
        return [None if _missing(x) else bool(x) for x in s.tolist()]
    if kind in ("date", "datetime"):
        return [None if _missing(x) else (x.to_pydatetime() if isinstance(x, pd.Timestamp) else x)
                for x in s.tolist()]
    return [None if _missing(x) or x == "" else cell_text(x) for x in s.tolist()]


def _rows(ws: Any, columns: Columns) -> Iterator[list[Any]]:
    """The data rows of ``columns``: typed values, date cells formatted, text never a formula."""
    from openpyxl.cell import WriteOnlyCell

    kinds = [kind for _, kind, _ in columns]
    for row in zip(*(_values(kind, s) for _, kind, s in columns), strict=True):
        out: list[Any] = []
        for v, kind in zip(row, kinds, strict=True):
            if isinstance(v, str):
                out.append(text_cell(ws, v))
            elif v is not None and kind in ("date", "datetime"):
                cell = WriteOnlyCell(ws, value=v)
                cell.number_format = DATE_FORMAT if kind == "date" else DATETIME_FORMAT
                out.append(cell)
            else:
                out.append(v)
        yield out


def append_table(ws: Any, columns: Columns) -> None:
    """Write ``columns`` into the write-only sheet ``ws``: a bold, frozen header, then the rows.

    Examples
    --------
    >>> import tempfile, pathlib, openpyxl
    >>> from openpyxl import Workbook
    >>> wb = Workbook(write_only=True)
    >>> ws = wb.create_sheet("t")
    >>> append_table(ws, [("note", "string", pd.Series(["=1+1"])), ("n", "integer", pd.Series([3]))])
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.xlsx"
    >>> wb.save(p)
    >>> [(c.value, c.data_type) for c in openpyxl.load_workbook(p)["t"][2]]
    [('=1+1', 's'), (3, 'n')]
    """
    ws.freeze_panes = "A2"
    ws.append(text_row(ws, [name for name, _, _ in columns], bold=True))
    for row in _rows(ws, columns):
        ws.append(row)


def _all_midnight(s: pd.Series) -> bool:
    return bool((s.dropna() == s.dropna().dt.normalize()).all())


def frame_columns(df: pd.DataFrame) -> list[tuple[str, str, pd.Series]]:
    """Each column of ``df`` with the kind of cell it is written as, and its values.

    Numeric, boolean and date columns keep their kind; a date-time column is ``date``
    when every time is midnight, ``datetime`` otherwise (text when it has a time
    zone, which Excel cannot store); every other column is text, each cell as
    :func:`~envlink.tables.cells.cell_text` writes it.

    Examples
    --------
    >>> t = pd.DataFrame({"n": [1, 2], "x": [0.5, None], "c": ["007", "=1"], "m": [1.5, "a"]})
    >>> [(name, kind) for name, kind, _ in frame_columns(t)]
    [('n', 'integer'), ('x', 'number'), ('c', 'string'), ('m', 'string')]
    """
    out = []
    for col in df.columns:
        s = df[col]
        if pd.api.types.is_datetime64_any_dtype(s.dtype):
            if getattr(s.dt, "tz", None) is not None:
                kind = "string"
            else:
                kind = "date" if _all_midnight(s) else "datetime"
        elif is_text_column(s):
            kind = "string"
        else:
            cells = [v for v in s.tolist() if not _missing(v)]
            kind = column_kind(s)
            if kind == "string" and cells and all(isinstance(v, _dt.datetime) for v in cells):
                kind = "datetime"
        out.append((str(col), kind, s))
    return out


def write_xlsx_table(df: pd.DataFrame, path: str | os.PathLike[str], *, sheet: str = "Sheet1") -> None:
    """Write ``df`` as a one-sheet workbook at ``path`` (:func:`frame_columns`, :func:`append_table`).

    A table longer than a worksheet is an :class:`~envlink.errors.InputError`.

    Examples
    --------
    >>> import tempfile, pathlib, openpyxl
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.xlsx"
    >>> write_xlsx_table(pd.DataFrame({"f": ['=HYPERLINK("http://x","y")']}), p)
    >>> c = openpyxl.load_workbook(p).active["A2"]
    >>> c.value, c.data_type
    ('=HYPERLINK("http://x","y")', 's')
    """
    from openpyxl import Workbook

    if len(df) >= EXCEL_MAX_ROWS:
        raise InputError(
            f"Cannot write table {str(path)!r}: the table has {len(df):,} rows and a worksheet holds "
            f"{EXCEL_MAX_ROWS - 1:,} under its header; write .csv, .tsv or .parquet instead."
        )
    wb = Workbook(write_only=True)
    append_table(wb.create_sheet(sheet), frame_columns(df))
    wb.save(path)
