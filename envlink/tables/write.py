"""Writing user tables atomically (CSV, TSV, Parquet, Excel), with the output path checked first."""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from envlink.core import outputs
from envlink.core.outputs import Inputs
from envlink.core.util import atomic_path
from envlink.errors import InputError
from envlink.tables.csvtext import write_csv
from envlink.tables.kinds import typed_frame
from envlink.tables.xlsx import write_xlsx_table

__all__ = ["write_table", "check_output_path", "check_cells_writable", "csv_line_end", "EXCEL_CELL_LIMIT"]

_WRITABLE = (".csv", ".tsv", ".parquet", ".pq", ".xlsx")


def check_output_path(path: str | os.PathLike[str], *, force: bool = False,
                      suffixes: Sequence[str] | None = None, inputs: Inputs = ()) -> Path:
    """Check, before any work, that a table (or another file) can be written at ``path``.

    The one output-path check of envlink (:func:`envlink.core.outputs.check_output_path`)
    with the table formats :func:`write_table` writes as the default ``suffixes``: an
    unknown extension, a folder, an input of the run (``inputs``, refused even with
    ``force``), an existing file without ``force`` or a folder where no file can be
    created is an :class:`InputError`.

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
    return outputs.check_output_path(path, force=force, inputs=inputs,
                                     suffixes=_WRITABLE if suffixes is None else suffixes)


#: Control characters an Excel worksheet cannot store (XML 1.0 forbids them).
_EXCEL_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")


#: The most characters an Excel cell holds (Excel's specifications and limits).
EXCEL_CELL_LIMIT = 32_767


def check_cells_writable(df: pd.DataFrame, path: str | os.PathLike[str]) -> None:
    """Refuse, before any work, cells the format of ``path`` cannot store (an :class:`InputError`).

    Only ``.xlsx`` has such limits: a control character other than tab, line feed and
    carriage return, or a text over 32,767 characters (Excel's cell limit; the cell
    would be cut). Other formats store every cell. Commands call it on the input table
    right after reading it, and :func:`write_table` calls it before writing.

    Examples
    --------
    >>> import pandas as pd
    >>> check_cells_writable(pd.DataFrame({"note": ["x" * 40000]}), "out.xlsx")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Cannot write table 'out.xlsx': row 1, column 'note' holds 40,000 characters; ...
    >>> check_cells_writable(pd.DataFrame({"note": ["x" * 40000]}), "out.csv")
    """
    p = Path(path)
    if p.suffix.lower() != ".xlsx":
        return
    for col in df.columns:
        values = df[col]
        if not (pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values)):
            continue
        for i, v in enumerate(values.tolist()):
            if not isinstance(v, str):
                continue
            if m := _EXCEL_ILLEGAL.search(v):
                raise InputError(
                    f"Cannot write table {str(p)!r}: row {i + 1}, column {str(col)!r} holds the "
                    f"control character U+{ord(m.group()):04X}, which Excel files cannot store; "
                    "remove it from the input, or write .csv, .tsv or .parquet instead."
                )
            if len(v) > EXCEL_CELL_LIMIT:
                raise InputError(
                    f"Cannot write table {str(p)!r}: row {i + 1}, column {str(col)!r} holds "
                    f"{len(v):,} characters; an Excel cell holds at most {EXCEL_CELL_LIMIT:,}, so it "
                    "would be cut. Write .csv, .tsv or .parquet instead, or shorten the cell."
                )


def csv_line_end(df: pd.DataFrame) -> str:
    """The line end to write ``df`` with: ``"\\n"``, or ``"\\r\\n"`` when a text cell holds a lone ``\\r``.

    Python's CSV writer quotes a cell holding a character of the line end only, so a
    carriage return in a cell would end the row for every reader unless it is part
    of the line end.

    Examples
    --------
    >>> import pandas as pd
    >>> csv_line_end(pd.DataFrame({"a": ["x"]})), csv_line_end(pd.DataFrame({"a": ["x\\ry"]}))
    ('\\n', '\\r\\n')
    """
    for col in df.columns:
        values = df[col]
        if isinstance(values.dtype, pd.StringDtype):  # vectorised (Arrow's kernel for Arrow strings)
            if values.str.contains("\r", regex=False).any():
                return "\r\n"
        elif pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values):
            if _has_cr(values):
                return "\r\n"
    return "\n"


def _has_cr(values: pd.Series) -> bool:
    """Whether a text cell of an object column holds ``\r`` (a column of text at once with Arrow)."""
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
    except ImportError:  # pyarrow is an optional extra
        pa = None
    if pa is not None and pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        try:
            arr = pa.array(values, type=pa.string(), from_pandas=True)
            return bool(pc.any(pc.match_substring(arr, "\r")).as_py())
        except (pa.ArrowException, TypeError, ValueError):  # odd cells: one by one
            pass
    return any(isinstance(v, str) and "\r" in v for v in values.tolist())


def _os_reason(exc: OSError, p: Path) -> str:
    """An OSError in words, without the temporary file's name."""
    reason = exc.strerror or str(exc)
    return f"cannot create a file in {str(p.parent) or '.'!r} ({reason})"


def write_table(df: pd.DataFrame, path: str | os.PathLike[str], *, force: bool = True) -> Path:
    """Write ``df`` atomically, choosing the format from the extension.

    Parameters
    ----------
    df : pandas.DataFrame
    path : path-like
        ``.csv``, ``.tsv``, ``.parquet`` / ``.pq`` or ``.xlsx``. CSV and TSV cells are
        written as they are; in Parquet and Excel a text column whose cells all parse
        as integers, numbers, ISO dates or true/false is written typed, a column that
        mixes numbers and text is written as text, each cell as written
        (:func:`envlink.tables.kinds.typed_frame`), and typed columns keep their types.
        Excel cells are written by :mod:`envlink.tables.xlsx`: a text starting with
        ``=`` stays text, never a formula.
    force : bool, default True
        When False, an existing file is an :class:`InputError`.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    p = check_output_path(path, force=force)
    suffix = p.suffix.lower()
    if suffix in (".parquet", ".pq", ".xlsx"):
        df = typed_frame(df)  # text columns of numbers, dates or booleans typed as such
    check_cells_writable(df, p)
    try:
        with atomic_path(p) as tmp:
            if suffix in (".csv", ".tsv"):  # the bytes pandas' to_csv writes, built faster
                write_csv(df, tmp, sep="\t" if suffix == ".tsv" else ",", lineterminator=csv_line_end(df))
            elif suffix in (".parquet", ".pq"):
                df.to_parquet(tmp, index=False)
            else:  # the one Excel writer (text never a formula)
                write_xlsx_table(df, tmp)
    except OSError as exc:
        raise InputError(f"Cannot write table {str(p)!r}: {_os_reason(exc, p)}.") from exc
    except ImportError as exc:
        raise InputError(f"Cannot write table {str(p)!r}: {exc}") from exc
    return p
