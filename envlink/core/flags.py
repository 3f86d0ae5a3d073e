"""QA flags: short lower-case codes joined by ``;``, each at most once per row.

The one home of the flag text format for every stage: :func:`join_flags` and
:func:`split_flags` for single cells, :func:`add_flag` for a vectorised column, and
:class:`RowFlags` to collect (rows, code) parts and render them once.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from numpy.typing import NDArray

__all__ = ["SEP", "join_flags", "split_flags", "add_flag", "RowFlags"]

#: Separator between the codes of one cell.
SEP = ";"


def split_flags(text: object) -> list[str]:
    """The codes of one cell, in order, blanks dropped.

    Examples
    --------
    >>> split_flags("outside_grid; partial_coverage;;"), split_flags(None)
    (['outside_grid', 'partial_coverage'], [])
    """
    if text is None or (isinstance(text, float) and text != text):
        return []
    return [c.strip() for c in str(text).split(SEP) if c.strip()]


def join_flags(codes: Iterable[str]) -> str:
    """One cell from codes: each code once, in first-seen order.

    Examples
    --------
    >>> join_flags(["a", "b", "a", ""])
    'a;b'
    """
    return SEP.join(dict.fromkeys(c for c in codes if c))


def add_flag(flags: NDArray[np.object_], mask: NDArray[np.bool_], code: str) -> None:
    """Append ``code`` in place to the cells of ``flags`` where ``mask`` holds (not twice).

    Examples
    --------
    >>> f = np.array(["", "a", "b"], dtype=object)
    >>> add_flag(f, np.array([True, True, False]), "a")
    >>> f.tolist()
    ['a', 'a', 'b']
    """
    sel = np.flatnonzero(mask)
    if not sel.size:
        return
    cur = flags[sel]
    empty = cur == ""
    has = np.zeros(sel.size, dtype=bool)
    busy = np.flatnonzero(~empty)  # only cells with codes can hold this one already
    if busy.size:
        has[busy] = np.fromiter((code in split_flags(c) for c in cur[busy]), dtype=bool, count=busy.size)
    flags[sel] = np.where(has, cur, np.where(empty, code, cur + SEP + code))


class RowFlags:
    """QA codes of ``n`` rows, collected as parts and rendered once: each code once per row.

    Examples
    --------
    >>> f = RowFlags(3)
    >>> f.add(np.array([True, False, True]), "partial_coverage")
    >>> f.add([2, 2], np.array(["nearest_valid_12km", "partial_coverage"], dtype=object))
    >>> f.render().tolist()
    ['partial_coverage', '', 'partial_coverage;nearest_valid_12km']
    """

    def __init__(self, n: int) -> None:
        self.n = n
        self._parts: list[tuple[np.ndarray, object]] = []

    def add(self, rows: np.ndarray | list[int], code: str | np.ndarray) -> None:
        """Add ``code`` (one text, or one per row) to ``rows`` (indices or a boolean mask)."""
        r = np.asarray(rows)
        idx = np.nonzero(r)[0] if r.dtype == bool else r.astype(np.int64)
        if idx.size:
            self._parts.append((idx, code))

    def extend(self, other: RowFlags) -> None:
        """Append every part of another collection over the same rows."""
        self._parts.extend(other._parts)

    def has(self, code: str, *, prefix: bool = False) -> np.ndarray:
        """Boolean mask of rows holding ``code`` (or a code starting with it)."""
        mask = np.zeros(self.n, dtype=bool)
        for idx, c in self._parts:
            if isinstance(c, str):
                if c == code or (prefix and c.startswith(code)):
                    mask[idx] = True
            else:
                texts = [str(x) for x in np.asarray(c, dtype=object)]
                hit = np.asarray([t == code or (prefix and t.startswith(code)) for t in texts], dtype=np.bool_)
                mask[idx[hit]] = True
        return mask

    def render(self) -> np.ndarray:
        """One ``;``-joined text per row (object array; ``""`` when none); no code twice."""
        out = np.full(self.n, "", dtype=object)
        has: dict[str, np.ndarray] = {}
        for idx, code in self._parts:
            if isinstance(code, str):
                groups = [(code, idx)]
            else:
                codes = np.asarray(code, dtype=object).astype(str)
                uniq, inv = np.unique(codes, return_inverse=True)
                order = np.argsort(inv, kind="stable")  # keep each code's rows in order
                bounds = np.searchsorted(inv[order], np.arange(uniq.size + 1))
                groups = [(str(u), idx[order[bounds[j]:bounds[j + 1]]]) for j, u in enumerate(uniq)]
            for c, rows in groups:
                if not c:
                    continue
                mask = has.setdefault(c, np.zeros(self.n, dtype=bool))
                rows = rows[~mask[rows]]
                if rows.size > 1 and not bool((rows[1:] > rows[:-1]).all()):
                    rows = np.unique(rows)  # sorted, each row once (skipped when already so)
                if rows.size:
                    mask[rows] = True
                    cur = out[rows]
                    out[rows] = np.where(cur == "", c, cur + SEP + c)
        return out
