"""Writing CSV fast, byte for byte as pandas' ``DataFrame.to_csv(index=False)`` writes it.

pandas formats every float with NumPy (about a microsecond each) and writes the rows
through Python's ``csv`` module. :func:`csv_bytes` builds the same text column by
column with Arrow compute kernels instead:

- floats: Arrow's shortest round-trip digits, which are Python's ``repr`` wherever
  Arrow writes them positionally (``1e-4 <= |x| < 1e15``), with ``.0`` added to
  whole numbers; the few other values (tiny, huge, or written by Arrow with an
  exponent) go through ``repr`` one by one; NaN is an empty cell;
- integers as ``str``; booleans as ``True`` / ``False`` (missing values of the
  nullable ``Int64`` / ``boolean`` kinds: empty cells); text as written, quoted
  (with inner quotes doubled) exactly where the ``csv`` module quotes it: when it
  holds the separator, a double quote or a character of the line terminator (found
  by asking the module once); missing text is an empty cell;
- each row is joined by Arrow, the rows' bytes are one buffer; large tables format
  their columns in threads (the kernels release the GIL).

Tables it does not handle (one column, other column types, names that are not text)
return None, and :func:`write_csv` lets pandas write them.
"""

from __future__ import annotations

import csv
import io
import os
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["csv_bytes", "write_csv"]


@cache
def _quoted_chars(sep: str, terminator: str) -> str:
    """The characters that make Python's ``csv`` module quote a field (asked once)."""
    found = []
    for c in sorted({sep, '"', "\r", "\n", "\t", " ", ";", ",", *terminator}):
        buf = io.StringIO()
        csv.writer(buf, delimiter=sep, lineterminator=terminator).writerow([f"a{c}b", "x"])
        if buf.getvalue().startswith('"'):
            found.append(c)
    return "".join(found)


def _s(text: str) -> Any:
    """A large-string Arrow scalar (the kernels want one type for every input)."""
    import pyarrow as pa

    return pa.scalar(text, pa.large_string())


def _floats(x: np.ndarray) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    # a column of few distinct values (cell centres, coverage): format each once
    if x.size > 4096 and np.unique(x[:: x.size // 1024]).size < 256:
        uniq, inv = np.unique(x, return_inverse=True)
        if uniq.size * 4 < x.size:
            return pc.take(_floats(uniq), pa.array(inv.ravel()))
    arr = pc.cast(pa.array(x, from_pandas=True), pa.large_string())  # NaN -> null -> empty cell
    ax = np.abs(x)
    with np.errstate(invalid="ignore"):
        whole = np.isfinite(x) & (x == np.floor(x))
        odd = np.isfinite(x) & (((ax < 1e-4) & (x != 0)) | (ax >= 1e15)) | np.isinf(x)
    exp = pc.fill_null(pc.match_substring(arr, "e"), False).to_numpy(zero_copy_only=False)
    odd |= exp & ~np.isnan(x)
    whole &= ~odd
    if whole.any():
        arr = pc.if_else(pa.array(whole), pc.binary_join_element_wise(arr, _s(".0"), _s("")), arr)
    if odd.any():
        text = pa.array([repr(v) for v in x[odd].tolist()], type=pa.large_string())
        arr = pc.replace_with_mask(arr, pa.array(odd), text)
    return arr


def _text(arr: Any, sep: str, terminator: str) -> Any:
    import pyarrow.compute as pc

    special = "[" + "".join("\\" + c if c in "\\^]-[" else c for c in _quoted_chars(sep, terminator)) + "]"
    need = pc.fill_null(pc.match_substring_regex(arr, special), False)
    if not pc.any(need).as_py():
        return arr
    quoted = pc.binary_join_element_wise(_s('"'), pc.replace_substring(arr, '"', '""'), _s('"'), _s(""))
    return pc.if_else(need, quoted, arr)


def _column(s: pd.Series, sep: str, terminator: str) -> Any:
    """One column as Arrow text, or None for a type left to pandas."""
    import pyarrow as pa
    import pyarrow.compute as pc

    dtype = s.dtype
    if dtype == np.float64:
        return _floats(s.to_numpy())
    if dtype == np.int64 or dtype == np.int32:
        return pc.cast(pa.array(s.to_numpy()), pa.large_string())
    if dtype == np.bool_:
        return pc.if_else(pa.array(s.to_numpy()), _s("True"), _s("False"))
    if isinstance(dtype, pd.Int64Dtype | pd.Int32Dtype):  # missing values: empty cells, as pandas writes
        return pc.cast(pa.array(s.array), pa.large_string())
    if isinstance(dtype, pd.BooleanDtype):
        return pc.if_else(pa.array(s.array), _s("True"), _s("False"))
    if isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow":
        arr = pa.array(s.array)
        if isinstance(arr, pa.ChunkedArray):
            arr = arr.combine_chunks()
        return _text(arr.cast(pa.large_string()), sep, terminator)
    if isinstance(dtype, pd.StringDtype) or (dtype.kind == "O" and pd.api.types.infer_dtype(s, skipna=True)
                                             in ("string", "empty")):
        values = s.to_numpy(dtype=object, na_value=None)
        if dtype.kind == "O":  # None, NaN and pd.NA are all missing (an empty cell)
            values = np.where(pd.isna(values), None, values)
        return _text(pa.array(values, type=pa.large_string(), from_pandas=True), sep, terminator)
    return None


def csv_bytes(df: pd.DataFrame, sep: str = ",", lineterminator: str | None = None) -> bytes | None:
    """The UTF-8 bytes of ``df.to_csv(index=False, sep=sep)``, or None when pandas should write it.

    Examples
    --------
    >>> t = pd.DataFrame({"a": [1.0, float("nan"), 1e-05], "b": ["x", 'say "hi", then', None]})
    >>> csv_bytes(t, lineterminator="\\n") == t.to_csv(index=False, lineterminator="\\n").encode()
    True
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    terminator = os.linesep if lineterminator is None else lineterminator
    if df.shape[1] < 2 or not all(isinstance(c, str) for c in df.columns):
        return None
    series = [df.iloc[:, j] for j in range(df.shape[1])]
    if len(df) * len(series) > 200_000:  # Arrow's and NumPy's kernels release the GIL: columns in threads
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=min(4, os.cpu_count() or 1)) as pool:
            cols = list(pool.map(lambda col: _column(col, sep, terminator), series))
    else:
        cols = [_column(col, sep, terminator) for col in series]
    if any(c is None for c in cols):
        return None
    head = io.StringIO()
    csv.writer(head, delimiter=sep, lineterminator=terminator).writerow(list(df.columns))
    if len(df) == 0:
        return head.getvalue().encode("utf-8")
    last = pc.binary_join_element_wise(pc.fill_null(cols[-1], _s("")), _s(terminator), _s(""))
    rows = pc.binary_join_element_wise(*cols[:-1], last, _s(sep), null_handling="replace", null_replacement="")
    if isinstance(rows, pa.ChunkedArray):
        rows = rows.combine_chunks()
    offsets = np.frombuffer(rows.buffers()[1], dtype=np.int64)[rows.offset : rows.offset + len(rows) + 1]
    body = memoryview(rows.buffers()[2])[int(offsets[0]) : int(offsets[-1])]
    return head.getvalue().encode("utf-8") + bytes(body)


def write_csv(df: pd.DataFrame, path: str | os.PathLike[str], *, sep: str = ",",
              lineterminator: str | None = None, encoding: str = "utf-8") -> None:
    """Write ``df`` as CSV (no index) at ``path``: the bytes pandas writes, faster.

    ``encoding`` is ``"utf-8"`` or ``"utf-8-sig"`` (a byte-order mark first) for the
    fast path; pandas writes any other.

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "t.csv"
    >>> write_csv(pd.DataFrame({"a": [0.5], "b": ["x"]}), p, lineterminator="\\n")
    >>> p.read_text()
    'a,b\\n0.5,x\\n'
    """
    data = None
    bom = {"utf-8": b"", "utf8": b"", "utf-8-sig": b"\xef\xbb\xbf"}.get(encoding.lower().replace("_", "-"))
    if bom is not None:
        try:
            data = csv_bytes(df, sep, lineterminator)
        except ImportError:  # pyarrow is an optional extra: pandas writes it
            data = None
    if data is None or bom is None:
        kwargs: dict[str, Any] = {"index": False, "sep": sep, "encoding": encoding}
        if lineterminator is not None:
            kwargs["lineterminator"] = lineterminator
        df.to_csv(path, **kwargs)
        return
    Path(path).write_bytes(bom + data)
