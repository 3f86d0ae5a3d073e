"""Reading grid cells on a Dask cluster: one task per group of storage tiles, the store written by workers.

``attach(..., client=)`` / ``envlink attach --scheduler ADDRESS`` read the cells a run
needs as ``dask.distributed`` tasks. The cells are grouped into the same tiles as a
single-machine read (:func:`envlink.extract.reader.tile_jobs`: rectangles aligned to
the storage chunks), so every tile is read once, by one worker, with the same read
and decoding (:func:`envlink.extract.reader.read_rect`); consecutive tiles are put
into a few tasks per worker thread. A task returns only the gathered cells; the client
puts them back in the order asked.

What is sent to a worker: for a file-backed grid, the file's path and the slice of
its tile (the worker opens the file itself, so every worker must see the grid's
files at the same path); for a grid held in memory, the tile's values.

With a cell-series store (:mod:`envlink.extract.store`), each task also writes the
series it read as a segment of the store (the same atomic writer,
:func:`envlink.extract.segments.write_segment`). That needs the store folder on a
file system every worker reaches at the same path; a worker that does not see the
folder (its ``grid.json``, written by the client before the tasks start) leaves its
cells to the client, which writes them as on a single machine, with a
:class:`~envlink.errors.CacheWarning` saying so. docs/scaling.md describes the setup.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from envlink.extract.reader import READ_ERRORS, TileResults, raise_read_error, read_rect, tile_jobs

if TYPE_CHECKING:
    import xarray as xr

    from envlink.extract.store import GridStore

__all__ = ["cluster_client", "read_on_cluster", "TASKS_PER_WORKER"]

#: Tasks per worker thread a read is split into (consecutive tiles share a task and a segment).
TASKS_PER_WORKER = 4


@contextlib.contextmanager
def cluster_client(client: Any) -> Iterator[Any]:
    """A ``dask.distributed.Client`` for ``client`` (a client, or a scheduler's address).

    Connects through :func:`envlink.core.cluster.connect`; a client opened here from an
    address is closed on leaving. A scheduler that does not answer is an
    :class:`~envlink.errors.InputError` about the ``client`` parameter.

    Examples
    --------
    >>> with cluster_client(None) as c:
    ...     c is None
    True
    """
    if client is None:
        yield None
        return
    from envlink.core.cluster import connect
    from envlink.errors import InputError

    try:
        opened = connect(client)
    except InputError as exc:
        exc.param = "client"
        raise
    try:
        yield opened
    finally:
        if opened is not client:
            opened.close()


def _read_task(reads: list[tuple], cells: list[np.ndarray], store: tuple | None) -> tuple:
    """On a worker: read each tile (``read_rect`` arguments), then write the asked cells'
    series as one store segment. Returns the reads' results, the index and exception of a
    read that failed (or None), and what was stored: (cells with data, empty cells) or a
    reason it was not."""
    import dask

    results = []
    with dask.config.set(scheduler="synchronous"):  # a dask-backed tile is computed here
        for i, args in enumerate(reads):
            try:
                results.append(read_rect(*args))
            except READ_ERRORS as exc:
                return results, (i, exc), "read failed"
    stored: tuple | str = "no store"
    if store is not None:
        stored = _write_segment(store, np.concatenate(cells), [r[0] for r in results])
    return results, None, stored


def _write_segment(store: tuple, cells: np.ndarray, series: list[np.ndarray]) -> tuple | str:
    """On a worker: the series of ``cells`` as a segment in the store folder, if it sees it."""
    import socket

    from envlink.extract.segments import write_segment
    from envlink.extract.storefiles import GRID_FILE

    folder, limit, nt, dtype = store
    if not (Path(folder) / GRID_FILE).is_file():
        return f"not visible on {socket.gethostname()}"
    X = np.concatenate(series)
    order = np.argsort(cells, kind="stable")
    has_data = np.isfinite(X).any(axis=1)[order]
    keep, empty = order[has_data], cells[order[~has_data]]
    size = 64 + 8 * cells.size + keep.size * nt * np.dtype(dtype).itemsize
    if size > limit:
        return "over limit"
    try:
        write_segment(Path(folder), cells[keep], empty, nt, np.dtype(dtype), [X[keep]],
                      owner=f"{socket.gethostname()}.{os.getpid()}")  # not removed as stale by other hosts
    except OSError as exc:
        return f"not writable on {socket.gethostname()} ({exc.strerror or exc})"
    return cells[keep], empty


def _store_spec(store: GridStore | None, nt: int, dtype: np.dtype) -> tuple | None:
    """What a worker needs to write segments; the folder and ``grid.json`` made first."""
    if store is None:
        return None
    try:
        store.prepare_folder()
    except OSError:
        return None  # the client cannot write it either: its flush warns
    return str(store.folder), store.limit, nt, dtype.str


def read_on_cluster(
    grid: xr.DataArray,
    flat: np.ndarray,
    client: Any,
    *,
    store: GridStore | None = None,
    progress: Callable[[int], object] | None = None,
    any_valid: np.ndarray | None = None,
    halo: tuple[int, int] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`~envlink.extract.reader.read_cells_near_gaps` as tasks on ``client``'s workers.

    Returns the same three arrays, then the cells (sorted) whose series, or whose lack
    of data, the workers wrote into ``store``.
    """
    import warnings

    from distributed import as_completed

    from envlink.errors import CacheWarning, user_stacklevel

    flat = np.asarray(flat, dtype=np.int64)
    nt, _, nx = grid.shape
    dtype = np.dtype(np.float64 if grid.dtype == np.float64 else np.float32)
    out = np.empty((flat.size, nt), dtype=dtype)
    jobs, _ = tile_jobs(grid, flat, halo)
    if not jobs:
        return out, np.array([], dtype=np.int64), np.empty((0, nt), dtype=dtype), np.array([], dtype=np.int64)
    threads = max(1, sum(client.nthreads().values()))
    spec = _store_spec(store, nt, dtype)
    groups = np.array_split(np.arange(len(jobs)), min(len(jobs), threads * TASKS_PER_WORKER))
    futures = {client.submit(_read_task, [jobs[j][5] for j in g], [flat[jobs[j][0]] for j in g], spec,
                             pure=False): g for g in groups if g.size}
    results = TileResults(out, nx, any_valid, progress)
    written: list[np.ndarray] = []
    unstored: set[str] = set()
    for fut in as_completed(list(futures)):
        group = futures[fut]
        parts, failed, stored = fut.result()
        if failed is not None:
            raise_read_error(grid, jobs[group[failed[0]]], failed[1])
        for j, result in zip(group, parts, strict=True):
            results.put(jobs[j], result)
        if isinstance(stored, tuple):
            written.extend(stored)
        elif stored.startswith("not"):
            unstored.add(stored)
        fut.release()
    if unstored and store is not None:
        warnings.warn(f"The cell-series store folder {str(store.folder)!r} is {'; '.join(sorted(unstored))}: the "
                      "client wrote those workers' cells instead. Put $ENVLINK_CACHE (or cache_dir=) on a file "
                      "system every worker mounts at the same path (docs/scaling.md).",
                      CacheWarning, stacklevel=user_stacklevel())
    done = np.unique(np.concatenate(written)) if written else np.array([], dtype=np.int64)
    if done.size and store is not None:
        store.tidy()
    return (*results.done(), done)
