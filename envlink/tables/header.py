"""The header row of a user table: blank cells get a name, two columns of one name are refused.

Data rows longer than the header are refused, naming the first such line, unless the
extra cells are all blank (a delimiter at the end of every data line): a reader must
never take the first column for row labels and shift the others under the wrong names.

A blank header cell (a spreadsheet column without a title, or a trailing delimiter)
is named ``column_N``, N its position counted from 1, with a
:class:`~envlink.errors.TableWarning` saying so: the column and its cells are kept,
and the name says where it came from (rather than a reader's ``Unnamed: 0``).
"""

from __future__ import annotations

import os
from collections.abc import Sequence

import pandas as pd

from envlink.errors import InputError, TableWarning, warn
from envlink.tables.cells import cell_text

__all__ = ["header_names", "without_extra_cells", "BLANK_COLUMN"]

#: Name given to a column whose header cell is blank; ``{n}`` is its position from 1.
BLANK_COLUMN = "column_{n}"


def header_names(names: Sequence[object], path: str | os.PathLike[str]) -> list[str] | None:
    """Check a header row; return the names to use when a cell is blank (None when none is).

    Parameters
    ----------
    names : sequence
        The header cells, in order.
    path : path-like
        The file, for messages.

    Raises
    ------
    InputError
        Two columns of one name (their positions are named).

    Warns
    -----
    TableWarning
        When blank cells were named ``column_N``.

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     header_names(["reef", "", "lat"], "t.csv")
    ['reef', 'column_2', 'lat']
    >>> str(caught[0].message)
    "Table 't.csv': column 2 has a blank header cell; it is read as 'column_2' (give it a name in the header to choose another)."
    >>> header_names(["reef", "lat"], "t.csv") is None
    True
    """
    texts = [cell_text(n) for n in names]
    seen: dict[str, int] = {}
    for i, key in enumerate(texts, start=1):
        if not key.strip():
            continue
        if key in seen:
            raise InputError(
                f"Cannot read table {str(path)!r}: columns {seen[key]} and {i} are both named "
                f"{key!r}; every column needs its own name, so rename one of them."
            )
        seen[key] = i
    blank = [i for i, key in enumerate(texts) if not key.strip()]
    if not blank:
        return None
    out = list(texts)
    taken = set(seen)
    for i in blank:
        name = BLANK_COLUMN.format(n=i + 1)
        while name in taken:
            name += "_"
        out[i] = name
        taken.add(name)
    which = ("column " if len(blank) == 1 else "columns ") + ", ".join(str(i + 1) for i in blank)
    given = ", ".join(repr(out[i]) for i in blank)
    verb = "has a blank header cell; it is" if len(blank) == 1 else "have blank header cells; they are"
    warn(f"Table {str(path)!r}: {which} {verb} read as {given} (give "
         f"{'it' if len(blank) == 1 else 'them'} a name in the header to choose another).", TableWarning)
    return out


def without_extra_cells(cells: pd.DataFrame, header: Sequence[object],
                        path: str | os.PathLike[str]) -> pd.DataFrame:
    """Data rows read without their header (``header=None``) cut to the header's width.

    Extra cells that are all blank are dropped; a row with a filled extra cell is an
    :class:`InputError` naming its line of the file (the header is line 1).

    Examples
    --------
    >>> import pandas as pd
    >>> cells = pd.DataFrame([["1", "2", ""], ["3", "4", ""]])
    >>> without_extra_cells(cells, ["a", "b"], "t.csv").to_dict("records")
    [{'a': '1', 'b': '2'}, {'a': '3', 'b': '4'}]
    >>> without_extra_cells(pd.DataFrame([["1", "2", "x"]]), ["a", "b"], "t.csv")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Cannot read table 't.csv': line 2 has 3 cells but the header has 2. ...
    """
    width = len(header)
    extra = cells.iloc[:, width:]
    filled = (extra.notna() & (extra.astype(str).apply(lambda c: c.str.strip()) != "")).to_numpy()
    if filled.any():
        row = int(filled.any(axis=1).argmax())
        count = width + int(filled[row].nonzero()[0].max()) + 1
        raise InputError(
            f"Cannot read table {str(path)!r}: line {row + 2} has {count} cells but the header has "
            f"{width}. A cell holding the delimiter must be in double quotes; give the extra "
            "column a name in the header, or remove the stray delimiter."
        )
    out = cells.iloc[:, :width]
    return out.set_axis([cell_text(h) for h in header], axis=1)
