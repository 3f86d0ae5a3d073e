"""Per-row QA flags collected as (rows, code) parts and rendered once, vectorised."""

from __future__ import annotations

import numpy as np

__all__ = ["RowFlags"]


class RowFlags:
    """QA codes of ``n`` rows; each row's codes are joined by ``;`` in insertion order.

    Examples
    --------
    >>> f = RowFlags(3)
    >>> f.add(np.array([True, False, True]), "partial_coverage")
    >>> f.add([2], np.array(["nearest_valid_12km"], dtype=object))
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
        """One ``;``-joined text per row (object array; ``""`` when none)."""
        out = np.full(self.n, "", dtype=object)
        for idx, code in self._parts:
            cur = out[idx]
            add = np.asarray(code, dtype=object) if not isinstance(code, str) else code
            out[idx] = np.where(cur == "", add, cur + ";" + add)
        return out
