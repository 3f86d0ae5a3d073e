"""Segment files of the cell-series store: sorted cells, known-empty cells and their series.

A segment is one immutable file holding, for one grid, the whole series of some
cells. Its layout (all little-endian)::

    8 bytes   magic b"ENVLSEG1"
    4 bytes   length L of the JSON header (uint32)
    L bytes   JSON: {"n": cells, "nt": time steps, "dtype": "<f4" or "<f8", "n_empty": m}
    padding   to a multiple of 64 bytes
    n × int64 the cells (flat indices ``iy * nx + ix``), sorted, unique
    m × int64 cells known to hold no data at any time step, sorted, unique
    padding   to a multiple of 64 bytes
    n × nt    the series, C order, in the order of the cells

The series are memory-mapped when read, so a request reads only the rows it needs.
A segment is written to a temporary file in the grid's folder (``.tmp-<pid>-<token>``;
from a worker of a cluster ``.tmp-<host>.<pid>-<token>``) and renamed into place once
complete: a run killed while writing leaves either no segment or a whole one (and a temporary file that a later run removes). A file of
another length than its header says is damaged: :func:`read_segment` returns None.
"""

from __future__ import annotations

import json
import os
import secrets
import struct
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from envlink.core.util import pause_for_tests

__all__ = ["Segment", "read_segment", "write_segment", "SUFFIX", "TMP_PREFIX"]

MAGIC = b"ENVLSEG1"
SUFFIX = ".cells"
TMP_PREFIX = ".tmp-"
#: Test hook: seconds to wait between writing a segment and renaming it into place.
_ALIGN = 64


def _aligned(n: int) -> int:
    return -(-n // _ALIGN) * _ALIGN


def _layout(n: int, nt: int, dtype: np.dtype, m: int) -> tuple[bytes, int, int, int, int]:
    """Header bytes, offsets of the cells, the empty cells and the series, and the file size."""
    text = json.dumps({"n": n, "nt": nt, "dtype": dtype.str, "n_empty": m}, separators=(",", ":")).encode()
    head = MAGIC + struct.pack("<I", len(text)) + text
    cells_at = _aligned(len(head))
    empty_at = cells_at + 8 * n
    series_at = _aligned(empty_at + 8 * m)
    return head, cells_at, empty_at, series_at, series_at + n * nt * dtype.itemsize


@dataclass
class Segment:
    """One segment file, its cells read and its series memory-mapped on first use."""

    path: Path
    cells: np.ndarray
    empty: np.ndarray
    nt: int
    dtype: np.dtype
    offset: int
    size: int
    _series: np.ndarray | None = field(default=None, repr=False)

    @property
    def series(self) -> np.ndarray:
        """The series, shape ``(n, nt)``, memory-mapped read-only."""
        if self._series is None:
            if self.cells.size == 0:
                self._series = np.empty((0, self.nt), dtype=self.dtype)
            else:
                self._series = np.memmap(self.path, dtype=self.dtype, mode="r", offset=self.offset,
                                         shape=(self.cells.size, self.nt))
        return self._series

    def rows(self, index: np.ndarray) -> np.ndarray:
        """The series of rows ``index`` (sorted for locality), as an in-memory array."""
        return np.asarray(self.series[np.asarray(index, dtype=np.int64)])


def read_segment(path: Path) -> Segment | None:
    """The segment at ``path`` (cells read, series mapped lazily); None when it is damaged.

    Raises
    ------
    OSError
        The file cannot be opened (e.g. removed by another run meanwhile).
    """
    with open(path, "rb") as fh:
        head = fh.read(12)
        if len(head) < 12 or head[:8] != MAGIC:
            return None
        (length,) = struct.unpack("<I", head[8:])
        try:
            meta = json.loads(fh.read(length))
            n, nt, m = int(meta["n"]), int(meta["nt"]), int(meta["n_empty"])
            dtype = np.dtype(meta["dtype"])
        except (ValueError, KeyError, TypeError):
            return None
        _, cells_at, empty_at, series_at, size = _layout(n, nt, dtype, m)
        if os.fstat(fh.fileno()).st_size != size or dtype.kind != "f":
            return None
        fh.seek(cells_at)
        cells = np.fromfile(fh, dtype="<i8", count=n)
        fh.seek(empty_at)
        empty = np.fromfile(fh, dtype="<i8", count=m)
    return Segment(path, cells.astype(np.int64), empty.astype(np.int64), nt, dtype, series_at, size)


def write_segment(
    folder: Path,
    cells: np.ndarray,
    empty: np.ndarray,
    nt: int,
    dtype: np.dtype,
    blocks: Iterable[np.ndarray] | Callable[[], Iterable[np.ndarray]],
    *,
    owner: str | None = None,
) -> Path:
    """Write a segment atomically into ``folder``; return its path.

    Parameters
    ----------
    cells : ndarray of int
        Sorted unique flat cells.
    empty : ndarray of int
        Sorted unique cells known to hold no data.
    nt : int
        Time steps of every series.
    dtype : numpy dtype
        float32 or float64.
    blocks : iterable of ndarray
        The series of ``cells`` in order, in blocks of rows (so no copy of the whole
        matrix is needed).
    owner : str, optional
        Who writes, in the temporary file's name (default this process's id, which a
        later run on this machine checks before removing the file as stale). A writer
        on another machine sharing the folder gives ``host.pid``: its temporary file
        is then removed only once it is an hour old.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> p = write_segment(d, np.array([3, 7]), np.array([5]), 2, np.dtype("<f4"),
    ...                   [np.array([[1.0, 2.0], [3.0, 4.0]], dtype="<f4")])
    >>> s = read_segment(p)
    >>> s.cells.tolist(), s.empty.tolist(), s.rows(np.array([1])).tolist()
    ([3, 7], [5], [[3.0, 4.0]])
    """
    dtype = np.dtype(dtype).newbyteorder("<")
    head, cells_at, empty_at, series_at, size = _layout(int(cells.size), int(nt), dtype, int(empty.size))
    token = secrets.token_hex(6)
    tmp = folder / f"{TMP_PREFIX}{owner or os.getpid()}-{token}"
    final = folder / f"seg-{time.time_ns():020d}-{os.getpid()}-{token}{SUFFIX}"
    try:
        with open(tmp, "wb") as fh:
            fh.write(head.ljust(cells_at, b"\0"))
            fh.write(np.ascontiguousarray(cells, dtype="<i8").tobytes())
            fh.write(np.ascontiguousarray(empty, dtype="<i8").tobytes())
            fh.write(b"\0" * (series_at - empty_at - 8 * empty.size))
            for block in blocks() if callable(blocks) else blocks:
                fh.write(np.ascontiguousarray(block, dtype=dtype).tobytes())
            if fh.tell() != size:
                raise OSError(f"segment of {fh.tell()} bytes written, {size} expected")
        pause_for_tests(final)
        os.replace(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()
    return final
