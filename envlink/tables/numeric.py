"""Reading a few numeric columns of a large table straight into float64 arrays (no pandas).

For big Parquet and CSV tables whose needed columns hold plain numbers, this reads
only those columns, row group by row group (Parquet) or in pyarrow's threaded CSV
reader, into preallocated float64 arrays: one copy of the data in memory, no table
of text cells. Whenever a column is not plainly numeric (text, booleans, decimal
commas, words for missing values, two columns of one name) it answers None and the
caller reads the table the ordinary way (:func:`envlink.tables.read_table`), whose
rules and messages then apply.
"""

from __future__ import annotations

import csv
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = ["NumericColumns", "read_numeric_columns", "table_rows", "parquet_pieces", "parquet_files"]


@dataclass
class NumericColumns:
    """Columns read as float64: ``vectors`` by name, and ``matrix`` (k × m, one column per name)."""

    vectors: dict[str, np.ndarray]
    matrix: np.ndarray
    matrix_names: list[str]
    names: list[str]  # every column of the file, in order

    @property
    def k(self) -> int:
        return int(self.matrix.shape[0])


def table_rows(path: str | os.PathLike[str]) -> int | None:
    """Rows of a Parquet file from its footer (None for other files or unreadable ones)."""
    p = Path(path)
    if p.suffix.lower() not in (".parquet", ".pq") or not p.is_file():
        return None
    try:
        import pyarrow.parquet as pq

        return int(pq.ParquetFile(p).metadata.num_rows)
    except Exception:  # noqa: BLE001 - not readable here: the ordinary reader reports it
        return None


def _numeric_type(t: object) -> bool:
    import pyarrow as pa

    return bool(pa.types.is_floating(t) or pa.types.is_integer(t))  # type: ignore[arg-type]


def _targets(k: int, vectors: Sequence[str], matrix: Sequence[str]
             ) -> tuple[dict[str, np.ndarray], np.ndarray, dict[str, np.ndarray]]:
    vec = {c: np.empty(k) for c in vectors}
    mat = np.empty((len(matrix), k)).T  # column-major: each column is contiguous
    dest = dict(vec)
    dest.update({c: mat[:, j] for j, c in enumerate(matrix)})
    return vec, mat, dest


def _put(dest: np.ndarray, lo: int, column: object) -> int:
    """Copy an Arrow (chunked) array into ``dest[lo:]``; returns the rows copied."""
    chunks = getattr(column, "chunks", [column])
    for ch in chunks:
        a = ch.to_numpy(zero_copy_only=False)  # nulls become NaN
        dest[lo:lo + a.shape[0]] = a
        lo += a.shape[0]
    return lo


def _read_parquet(p: Path, vectors: Sequence[str], matrix: Sequence[str]) -> NumericColumns | None:
    import pyarrow.parquet as pq

    pf = pq.ParquetFile(p)
    schema = pf.schema_arrow
    names = list(schema.names)
    wanted = list(dict.fromkeys([*vectors, *matrix]))
    for c in wanted:
        if names.count(c) != 1 or not _numeric_type(schema.field(c).type):
            return None
    if len(set(names)) < len(names):
        return None  # two columns of one name: the ordinary reader says so
    k = int(pf.metadata.num_rows)
    vec, mat, dest = _targets(k, vectors, matrix)
    lo = 0
    for i in range(pf.num_row_groups):
        t = pf.read_row_group(i, columns=wanted, use_threads=True)
        for c in wanted:
            _put(dest[c], lo, t.column(c))
        lo += t.num_rows
    return NumericColumns(vec, mat, list(matrix), names)


def _sniff(p: Path) -> tuple[str, list[str]] | None:
    """The delimiter (the rule of :func:`envlink.tables.read_table`) and the header's names."""
    with open(p, "rb") as fh:
        raw = fh.readline()
    try:
        first = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return None
    first = re.split(r"\r\n|\r|\n", first, maxsplit=1)[0]
    if p.suffix.lower() == ".tsv" or "\t" in first:
        sep = "\t"
    elif first.count(";") > first.count(","):
        sep = ";"
    else:
        sep = ","
    try:
        header = next(csv.reader([first], delimiter=sep), [])
    except csv.Error:
        return None
    return sep, header


def _read_csv(p: Path, vectors: Sequence[str], matrix: Sequence[str]) -> NumericColumns | None:
    import pyarrow as pa
    from pyarrow import csv as pacsv

    sniffed = _sniff(p)
    if sniffed is None:
        return None
    sep, names = sniffed
    wanted = list(dict.fromkeys([*vectors, *matrix]))
    if len(set(names)) < len(names) or any(names.count(c) != 1 for c in wanted):
        return None
    try:
        table = pacsv.read_csv(
            p, parse_options=pacsv.ParseOptions(delimiter=sep),
            convert_options=pacsv.ConvertOptions(
                include_columns=wanted, column_types={c: pa.float64() for c in wanted},
                null_values=[""], strings_can_be_null=False, quoted_strings_can_be_null=True),
        )
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError):
        return None  # a cell that is not a plain number: the ordinary reader decides
    k = table.num_rows
    vec, mat, dest = _targets(k, vectors, matrix)
    for c in wanted:
        col = table.column(c)
        _put(dest[c], 0, col)
        # "nan" or "inf" written as text: the ordinary reader has its own rule for those
        if int(np.count_nonzero(~np.isfinite(dest[c]))) != col.null_count:
            return None
    return NumericColumns(vec, mat, list(matrix), names)


def read_numeric_columns(path: str | os.PathLike[str], vectors: Sequence[str],
                         matrix: Sequence[str] = ()) -> NumericColumns | None:
    """Read plainly numeric columns of a Parquet or CSV/TSV file as float64, or None.

    Parameters
    ----------
    path : path-like
        A ``.parquet`` / ``.pq`` file, or a ``.csv`` / ``.tsv`` / ``.txt`` file in UTF-8
        (delimiter sniffed as :func:`envlink.tables.read_table` does).
    vectors : sequence of str
        Columns returned one array each (``NumericColumns.vectors``).
    matrix : sequence of str
        Columns returned together as one k × m float64 matrix (column-major).

    Returns
    -------
    NumericColumns or None
        None when the file is of another kind, a column is missing or is not plainly
        numeric (missing cells are blank or null, and become NaN): read the table with
        :func:`envlink.tables.read_table` then.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("e,v,x\\n0.1,0.01,1\\n0.3,,2\\n")
    >>> cols = read_numeric_columns(p, ["e", "v"], ["x"])
    >>> cols.vectors["v"].tolist(), cols.matrix.shape
    ([0.01, nan], (2, 1))
    >>> _ = p.write_text("e;v\\n0,1;0,01\\n")
    >>> read_numeric_columns(p, ["e", "v"]) is None   # decimal commas: the ordinary reader
    True
    """
    p = Path(path)
    if not p.is_file():
        return None
    suffix = p.suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            return _read_parquet(p, vectors, matrix)
        if suffix in (".csv", ".tsv", ".txt"):
            return _read_csv(p, vectors, matrix)
    except ImportError:
        return None
    return None


def parquet_files(source: str | os.PathLike[str] | Sequence[str | os.PathLike[str]]) -> list[str]:
    """The Parquet files of a file, a folder (searched recursively), a glob or a list, sorted.

    Raises
    ------
    InputError
        No file matches.
    """
    import glob

    from envlink.errors import InputError

    if isinstance(source, str | os.PathLike):
        p = Path(source)
        files = (sorted(str(f) for f in p.rglob("*") if f.is_file() and f.suffix.lower() in
                        (".parquet", ".pq")) if p.is_dir() else sorted(glob.glob(str(source))))
    else:
        files = [str(f) for f in source]
    if not files:
        raise InputError(f"No Parquet files at {str(source)!r}.")
    return files


def parquet_pieces(source: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
                   columns: Sequence[str], *, numeric: Sequence[str] = (),
                   what: str = "this step") -> list[tuple[str, int, int]]:
    """(file, row group, rows) of a Parquet source, in file order, with its columns checked.

    Every file must hold ``columns``; those in ``numeric`` must hold numbers (or
    booleans). ``what`` names the caller in messages.

    Examples
    --------
    >>> import tempfile, pathlib, pandas as pd
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> pd.DataFrame({"g": [1, 2, 3], "x": [0.5, 1.5, 2.5]}).to_parquet(folder / "a.parquet")
    >>> parquet_pieces(folder, ["g", "x"], numeric=["x"])[0][1:]
    (0, 3)
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    from envlink.errors import InputError

    pieces = []
    for f in parquet_files(source):
        try:
            pf = pq.ParquetFile(f)
        except Exception as exc:  # noqa: BLE001 - pyarrow raises several types
            raise InputError(f"Cannot read Parquet file {f!r}: {exc}") from None
        schema = pf.schema_arrow
        for c in columns:
            if c not in schema.names:
                raise InputError(f"Column {c!r} is not in {f!r}; its columns: "
                                 f"{', '.join(schema.names)}.")
            kind = schema.field(c).type
            if c in numeric and not (_numeric_type(kind) or pa.types.is_boolean(kind)):
                raise InputError(f"Column {c!r} of {f!r} must hold numbers (it is {kind}); "
                                 f"{what} reads numeric columns only.")
        pieces += [(f, i, pf.metadata.row_group(i).num_rows) for i in range(pf.num_row_groups)]
    return pieces
