"""Cell series of one grid, each read once: from memory, the cell-series store, or the grid.

:class:`CellSeries` is what the spatial rules read cells through
(:meth:`~envlink.extract.rules.base.SpatialRule.read`). A request for some cells is
answered, in order, from the series already in memory (read earlier in this run, for
this or another covariate), from the store (:mod:`envlink.extract.store`), from the
cells known to hold no data at any step (all NaN), and only then from the grid
(:func:`envlink.extract.reader.read_cells_near_gaps`). :meth:`CellSeries.flush` keeps
the series read from the grid in the store; :meth:`CellSeries.origin` says where a
set of cells came from, for provenance.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import AbstractContextManager
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import xarray as xr

    from envlink.extract.segments import Segment
    from envlink.extract.store import GridStore

__all__ = ["CellSeries"]

_FLUSH_BYTES = 16 * 2**20


@dataclass(eq=False)
class _Part:
    """Cells (sorted, unique) and their series: in memory, or a segment of the store."""

    cells: np.ndarray
    X: np.ndarray | None = None
    segment: Segment | None = None
    from_store: bool = False
    used: bool = field(default=False)

    def rows(self, index: np.ndarray) -> np.ndarray:
        if self.segment is not None:
            return self.segment.rows(index)
        assert self.X is not None
        return self.X[index]

    def find(self, cells: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Which of ``cells`` this part holds, and their rows in it."""
        if self.cells.size == 0:
            return np.zeros(cells.size, dtype=bool), np.zeros(cells.size, dtype=np.int64)
        pos = np.minimum(np.searchsorted(self.cells, cells), self.cells.size - 1)
        return self.cells[pos] == cells, pos


def _local_scheduler(grid: xr.DataArray) -> AbstractContextManager[object]:
    """Dask's threaded scheduler named outright for a dask-backed grid when no cluster can be
    in use (``distributed`` not imported): dask then does not import ``distributed`` (0.4 s)
    only to find that no client is running."""
    import contextlib
    import sys

    if grid.chunks is None or "distributed" in sys.modules:
        return contextlib.nullcontext()
    import dask
    import dask.threaded

    if dask.config.get("scheduler", None) is not None:
        return contextlib.nullcontext()
    return dask.config.set(scheduler=dask.threaded.get)  # a function: no look for a cluster


class CellSeries:
    """Whole series of grid cells, each read at most once per run (see the module).

    Parameters
    ----------
    grid : xarray.DataArray
        The normalised grid.
    store : GridStore, optional
        Its store; without one, series are read from the grid and kept in memory only.
    show : bool, optional
        Progress bars while reading the grid (see :mod:`envlink.core.progress`).
    client : dask.distributed.Client, optional
        Read the grid's cells as tasks on this client's workers, which also write the
        series into the store (:mod:`envlink.extract.cluster_read`).

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> cs = CellSeries(make_grid(np.arange(8.0).reshape(2, 2, 2), lat=[0, 1], lon=[0, 1]))
    >>> cs.get(np.array([3, 0])).tolist(), cs.get(np.array([3])).tolist(), cs.cells_read
    ([[3.0, 7.0], [0.0, 4.0]], [[3.0, 7.0]], 2)
    """

    def __init__(self, grid: xr.DataArray, store: GridStore | None = None, show: bool | None = None,
                 client: object | None = None) -> None:
        self.grid, self.store, self.show, self.client = grid, store, show, client
        self._by_workers: list[np.ndarray] = []  # cells the cluster's workers wrote into the store
        self.nt = int(grid.shape[0])
        self.shape = (int(grid.shape[1]), int(grid.shape[2]))
        self.dtype = np.dtype(np.float64 if grid.dtype == np.float64 else np.float32)
        self._parts: list[_Part] = []
        self._to_store: list[np.ndarray] = []
        self._any_valid: np.ndarray | None = None
        self.cells_read = 0
        empty = np.array([], dtype=np.int64)
        if store is not None:
            self._parts = [_Part(s.cells, segment=s, from_store=True) for s in store.segments]
            empty = store.known_empty
        self._store_empty = empty
        stored = [p.cells for p in self._parts]
        self._stored = np.unique(np.concatenate([*stored, empty])) if stored or empty.size else empty
        if client is None and not self._parts:  # series to read from the grid, likely many
            from envlink.extract.reader import prepare_readers

            prepare_readers(grid)

    @classmethod
    def for_grid(cls, grid: xr.DataArray, cache_dir: str | None = None, *, show: bool | None = None,
                 client: object | None = None) -> CellSeries:
        """The grid's series through its store under ``cache_dir`` (no store when None).

        Examples
        --------
        >>> from envlink.testing import make_grid
        >>> CellSeries.for_grid(make_grid(np.zeros((2, 2, 2)), lat=[0, 1], lon=[0, 1])).store is None
        True
        """
        store = None
        if cache_dir is not None:
            from envlink.extract.store import GridStore

            store = GridStore.for_grid(grid, cache_dir)
        return cls(grid, store, show=show, client=client)

    @property
    def any_valid(self) -> np.ndarray:
        """``(ny, nx)`` int8: 1 a cell with data at some step, 0 one without, -1 unknown."""
        if self._any_valid is None:
            self._any_valid = np.full(self.shape, -1, dtype=np.int8)
            self._any_valid.ravel()[self._store_empty] = 0
        return self._any_valid

    def _known_empty(self) -> np.ndarray:
        if self._any_valid is None:
            return self._store_empty
        return np.flatnonzero(self._any_valid.ravel() == 0)

    def get(self, cells: np.ndarray, *, desc: str = "attach: reading cells",
            halo: tuple[int, int] | None = None) -> np.ndarray:
        """The series of ``cells`` (unique flat indices), shape ``(len(cells), time)``.

        ``halo`` is passed to the reader for the cells read from the grid (it also
        gathers the cells with data near gaps, kept in memory for a ``nearest-valid``
        search).
        """
        cells = np.asarray(cells, dtype=np.int64)
        for part in self._parts:  # the whole request is one part read earlier: no copy
            if part.X is not None and part.cells.size == cells.size and np.array_equal(part.cells, cells):
                self._to_store.append(cells)
                return part.X
        out = np.empty((cells.size, self.nt), dtype=self.dtype)
        left = np.ones(cells.size, dtype=bool)
        for part in reversed(self._parts):
            idx = np.nonzero(left)[0]
            if idx.size == 0:
                break
            hit, pos = part.find(cells[idx])
            if hit.any():
                out[idx[hit]] = part.rows(pos[hit])
                left[idx[hit]] = False
                if part.segment is not None and self.store is not None:
                    self.store.touch(part.segment)
                elif not part.from_store:
                    self._to_store.append(cells[idx[hit]])
        idx = np.nonzero(left)[0]
        empty = np.isin(cells[idx], self._known_empty())
        out[idx[empty]] = np.nan
        idx = idx[~empty]
        sorted_request = cells.size > 1 and bool(np.all(cells[1:] > cells[:-1]))
        if idx.size:
            order = np.argsort(cells[idx], kind="stable")
            missing = cells[idx[order]]
            X, extra_cells, extra_X = self._read(missing, desc, halo)
            self._to_store.append(missing)
            if extra_cells.size:
                o = np.argsort(extra_cells, kind="stable")
                self._add(extra_cells[o], extra_X[o])
            del extra_X
            if idx.size == cells.size and np.all(order == np.arange(idx.size)):
                self._add(missing, X)
                return X  # everything was read now, in the order asked: ``out`` is never touched
            out[idx[order]] = X
            if not sorted_request:
                self._add(missing, X)
            del X
        if sorted_request:
            self._add(cells, out)  # kept in memory: later requests take rows of it, no copy
        return out

    def view(self, cells: np.ndarray, *, desc: str = "attach: reading cells",
             halo: tuple[int, int] | None = None) -> tuple[np.ndarray, np.ndarray]:
        """The series of ``cells`` as an array held in memory and each cell's row in it.

        No copy is made when one part held in memory has every cell (the cells
        gathered for all the covariates of a call); else the series are gathered
        (:meth:`get`).
        """
        cells = np.asarray(cells, dtype=np.int64)
        for part in reversed(self._parts):
            if part.X is None:
                continue
            hit, pos = part.find(cells)
            if hit.all():
                if not part.from_store:
                    self._to_store.append(cells)
                return part.X, pos
        return self.get(cells, desc=desc, halo=halo), np.arange(cells.size)

    def view_with(self, base: np.ndarray, more: np.ndarray, *,
                  desc: str = "attach: reading cells") -> tuple[np.ndarray, np.ndarray]:
        """:meth:`view` of ``base`` then ``more``: where no part holds them all, the part
        holding ``base`` is merged with the series of ``more`` into one (a single copy,
        which later requests of the same cells reuse)."""
        both = np.concatenate([np.asarray(base, dtype=np.int64), np.asarray(more, dtype=np.int64)])
        for part in reversed(self._parts):
            if part.X is not None and part.find(both)[0].all():
                return self.view(both, desc=desc)
        holder = next((p for p in reversed(self._parts) if p.X is not None and p.find(base)[0].all()), None)
        if holder is None or more.size == 0:
            return self.view(both, desc=desc)
        extra = np.setdiff1d(more, holder.cells)
        unheld = extra[~self._in_memory(extra)]
        if unheld.size:  # from the store or the grid, in one pass; kept in memory as a part
            self.get(unheld, desc=desc)
        cells = np.union1d(holder.cells, extra)
        merged = np.empty((cells.size, self.nt), dtype=self.dtype)  # one copy, in order
        merged[np.searchsorted(cells, holder.cells)] = holder.X
        self._fill(merged, np.searchsorted(cells, extra), extra)
        # the parts whose every cell is now in ``merged`` are dropped (no second copy kept)
        self._parts = [p for p in self._parts if p.X is None or not np.isin(p.cells, cells).all()]
        self._add(cells, merged)
        self._to_store.append(extra)
        return self.view(both, desc=desc)

    def _in_memory(self, cells: np.ndarray) -> np.ndarray:
        """Which of ``cells`` a part held in memory has."""
        held = np.zeros(cells.size, dtype=bool)
        for part in self._parts:
            if part.X is not None:
                held |= part.find(cells)[0]
        return held

    def _fill(self, target: np.ndarray, at: np.ndarray, cells: np.ndarray) -> None:
        """``target[at] =`` the series of ``cells`` (all held in memory), a block at a time
        (no whole copy of them on the way)."""
        step = max(1, _FLUSH_BYTES // max(self.nt * self.dtype.itemsize, 1))
        left = np.ones(cells.size, dtype=bool)
        for part in reversed(self._parts):
            if part.X is None:
                continue
            idx = np.nonzero(left)[0]
            hit, pos = part.find(cells[idx])
            idx, pos = idx[hit], pos[hit]
            for a in range(0, idx.size, step):
                target[at[idx[a : a + step]]] = part.X[pos[a : a + step]]
            left[idx] = False
        assert not left.any(), "cells to merge that no part in memory holds"

    def _add(self, cells: np.ndarray, X: np.ndarray) -> None:
        self._parts.append(_Part(cells, X=X))

    def _read(self, cells: np.ndarray, desc: str,
              halo: tuple[int, int] | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        from envlink.core.progress import progress_bar
        from envlink.extract.reader import cell_reader, read_cells_near_gaps

        with progress_bar(cells.size, desc, "cell", self.show) as bar:
            if self.client is not None and cell_reader(self.grid) is None:
                from envlink.extract.cluster_read import read_on_cluster

                X, extra, extra_X, written = read_on_cluster(self.grid, cells, self.client, store=self.store,
                                                             progress=bar.update, any_valid=self._any_valid,
                                                             halo=halo)
                self._by_workers.append(written)
                got = (X, extra, extra_X)
            else:
                with _local_scheduler(self.grid):
                    got = read_cells_near_gaps(self.grid, cells, progress=bar.update, any_valid=self._any_valid,
                                               halo=halo)
        self.cells_read += cells.size
        return got

    def origin(self, cells: np.ndarray) -> str:
        """Where the series of ``cells`` came from: ``"store"``, ``"read"``, ``"partly store"``
        (some from each) or ``"none"`` (no cells)."""
        cells = np.asarray(cells, dtype=np.int64)
        if cells.size == 0:
            return "none"
        if self.cells_read == 0:  # nothing read from the grid in this run: no need to sort the cells
            return "store"
        cells = np.unique(cells)
        stored = np.isin(cells, self._stored)
        return "store" if stored.all() else "read" if not stored.any() else "partly store"

    def _gather(self, cells: np.ndarray) -> np.ndarray:
        out = np.full((cells.size, self.nt), np.nan, dtype=self.dtype)
        left = np.ones(cells.size, dtype=bool)
        for part in reversed(self._parts):
            if part.from_store:
                continue
            idx = np.nonzero(left)[0]
            hit, pos = part.find(cells[idx])
            out[idx[hit]] = part.rows(pos[hit])
            left[idx[hit]] = False
        return out

    def flush(self) -> str:
        """Keep the series read from the grid in the store (those asked for, not the extra
        cells gathered on the way), and the cells learned to hold no data.

        Returns ``"off"`` (no store), ``"unchanged"`` (nothing new), or what
        :meth:`GridStore.add` returns (``"stored"``, ``"over limit"``, ``"not stored"``).
        """
        if self.store is None:
            return "off"
        if self.cells_read == 0:  # every series came from the store: nothing new to keep
            return "unchanged"
        asked = np.unique(np.concatenate(self._to_store)) if self._to_store else np.array([], dtype=np.int64)
        done = np.concatenate([self._stored, *self._by_workers])  # in the store already
        asked = asked[~np.isin(asked, done)]
        empty = np.setdiff1d(self._known_empty(), np.concatenate([self._store_empty, *self._by_workers]))
        has_data = np.ones(asked.size, dtype=bool)
        step = max(1, _FLUSH_BYTES // max(self.nt * self.dtype.itemsize, 1))
        for a in range(0, asked.size, step):
            has_data[a : a + step] = np.isfinite(self._gather(asked[a : a + step])).any(axis=1)
        empty = np.union1d(empty, asked[~has_data])
        cells = asked[has_data]
        if cells.size == 0 and empty.size == 0:
            return "stored" if any(w.size for w in self._by_workers) else "unchanged"

        def blocks() -> Iterator[np.ndarray]:
            for a in range(0, cells.size, step):
                yield self._gather(cells[a : a + step])

        self._to_store = []
        return self.store.add(cells, empty, self.nt, self.dtype, blocks)
