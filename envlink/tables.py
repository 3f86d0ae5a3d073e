"""Reading and writing user tables (CSV, TSV, Parquet, Excel) with clear errors.

Every stage meets the outside world through these two functions, so encodings,
extensions and atomic writes are handled once.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import pandas as pd

from envlink._util import atomic_path, did_you_mean
from envlink.errors import InputError

__all__ = ["read_table", "write_table", "require_columns", "TABLE_SUFFIXES"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".pq", ".xlsx", ".xls")


def _decode(raw: bytes, path: Path) -> str:
    if raw.startswith(b"\xef\xbb\xbf"):
        return raw[3:].decode("utf-8")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        # Latin-1 maps every byte, so it is the fallback for legacy spreadsheets.
        return raw.decode("latin-1")


def read_table(path: str | os.PathLike[str], *, as_text: bool = False) -> pd.DataFrame:
    """Read a CSV / TSV / Parquet / Excel table.

    Parameters
    ----------
    path : path-like
        The file. CSV may be UTF-8 (with or without BOM) or Latin-1; the delimiter
        of ``.csv`` files is sniffed among ``,``, ``;`` and tab.
    as_text : bool, default False
        Read every cell as text, exactly as written (blank cells become ``""``), so
        that a stage can keep the user's columns unchanged.

    Returns
    -------
    pandas.DataFrame

    Raises
    ------
    InputError
        The file is missing, unreadable, or of an unknown type; the message names
        the path and the reason.

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
            return df.astype(str).where(df.notna(), "") if as_text else df
        if suffix in (".xlsx", ".xls"):
            df = pd.read_excel(p, dtype=str if as_text else None)
            return df.fillna("") if as_text else df
        if suffix not in (".csv", ".tsv", ".txt"):
            raise InputError(
                f"Cannot read table {str(p)!r}: unknown extension {suffix!r}; "
                f"expected one of {', '.join(TABLE_SUFFIXES)}."
            )
        import io

        text = _decode(p.read_bytes(), p)
        first = text.split("\n", 1)[0]
        if suffix == ".tsv" or "\t" in first:
            sep = "\t"
        elif first.count(";") > first.count(","):
            sep = ";"
        else:
            sep = ","
        kwargs: dict[str, object] = {"sep": sep}
        if as_text:
            kwargs.update(dtype=str, keep_default_na=False, na_filter=False)
        return pd.read_csv(io.StringIO(text), **kwargs)  # type: ignore[call-overload]
    except InputError:
        raise
    except (OSError, ValueError, ImportError, pd.errors.ParserError) as exc:
        raise InputError(f"Cannot read table {str(p)!r}: {exc}") from exc


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
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in (".csv", ".tsv", ".parquet", ".pq", ".xlsx"):
        raise InputError(
            f"Cannot write table {str(p)!r}: unknown extension {suffix!r}; "
            "expected .csv, .tsv, .parquet or .xlsx."
        )
    if p.exists() and not force:
        raise InputError(f"{str(p)!r} exists; pass --force to overwrite it.")
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
    except (OSError, ImportError) as exc:
        raise InputError(f"Cannot write table {str(p)!r}: {exc}") from exc
    return p


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
        if col is not None and col not in have:
            listing = ", ".join(repr(c) for c in have[:20])
            raise InputError(
                f"The {what} has no column {col!r}.{did_you_mean(col, have)} Columns: {listing}."
            )
