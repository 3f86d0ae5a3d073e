"""Reading the full time series of selected cells from a (possibly lazy) grid.

Cells are read by rectangular tiles aligned to the storage chunks (dask chunks, or
the netCDF/HDF5 ``chunksizes`` encoding), and only tiles that hold a needed cell are
read; every tile is read once, with all time steps (in time slabs of about 32 MiB),
then the needed cells are gathered from it with NumPy. Large lazy grids (more than
128 MiB to read) are read by several processes, one tile each (as many as cores, or
``$ENVLINK_READ_WORKERS``: this process and reader processes started by
:func:`envlink.core.processes.worker_pool`); each returns only the gathered cells. This avoids per-site ``.sel`` loops and the
outer-product indexing that pointwise selection on a lazy array turns into.

A read that fails (a file damaged, truncated or removed after it was opened) is a
:class:`~envlink.errors.GridError` raised here, naming the grid's file, the variable
and the cells being read.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from typing import NoReturn

import numpy as np
import xarray as xr

from envlink.extract.rect import _TILE_BYTES, read_rect

__all__ = ["read_cells", "read_cells_near_gaps", "prepare_readers", "storage_chunks", "grid_label", "cell_reader", "tile_jobs", "TileResults",
           "read_rect", "raise_read_error", "READ_ERRORS"]

_PARALLEL_BYTES = 128 * 2**20
_TRIM_VALUES = 2**20  # blocks from this many values on are given back once read


def storage_chunks(grid: xr.DataArray) -> tuple[int, int]:
    """The chunk size along the two horizontal dims (1 when not chunked there)."""
    ny, nx = grid.shape[1], grid.shape[2]
    if grid.chunks is not None:
        return int(max(grid.chunks[1])), int(max(grid.chunks[2]))
    cs = grid.encoding.get("chunksizes") or grid.encoding.get("chunks")
    if cs and len(cs) == 3:
        return int(min(cs[1], ny)), int(min(cs[2], nx))
    return 1, 1


def _time_chunk(grid: xr.DataArray) -> int:
    if grid.chunks is not None:
        return int(max(grid.chunks[0]))
    cs = grid.encoding.get("chunksizes") or grid.encoding.get("chunks")
    return int(cs[0]) if cs and len(cs) == 3 else 1


def _tiles(ny: int, nx: int, nt: int, itemsize: int, chunks: tuple[int, int]) -> tuple[int, int]:
    cy, cx = chunks
    tx = nx if cx == 1 else max(cx, (nx // cx) * cx if nt * cy * nx * itemsize <= _TILE_BYTES else cx)
    rows = max(1, _TILE_BYTES // max(nt * tx * itemsize, 1))
    ty = max(cy, (rows // cy) * cy)
    return min(ty, ny), min(tx, nx)


def _workers(grid: xr.DataArray, volume: int, n_jobs: int) -> int:
    """Processes for reading: several for large file-backed (lazy) grids, else one."""
    if n_jobs < 2 or volume < _PARALLEL_BYTES:
        return 1
    if grid.chunks is None and bool(getattr(grid.variable, "_in_memory", True)):
        return 1
    if _cheap_reads(grid):
        return 1
    env = os.environ.get("ENVLINK_READ_WORKERS")
    n = int(env) if env and env.isdigit() else (os.cpu_count() or 1)
    return max(1, min(n, n_jobs, 16))


def prepare_readers(grid: xr.DataArray) -> None:
    """Start the reader processes now when this grid will likely be read by several
    (:func:`envlink.core.processes.warm_up`), so that their start-up overlaps the
    planning instead of delaying the first read.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> prepare_readers(make_grid(np.zeros((1, 1, 1)), lat=[0], lon=[0]))  # in memory: nothing to start
    """
    volume = int(np.prod(grid.shape)) * (8 if grid.dtype == np.float64 else 4)
    if _storage_info(grid).get("remote") is True or cell_reader(grid) is not None:
        return
    workers = _workers(grid, volume, 2**30)
    if workers < 2:
        return
    from envlink.core.processes import warm_up

    warm_up(workers - 1)  # this process reads too (see _read_shared)


def _storage_info(grid: xr.DataArray) -> dict:
    """The grid's ``envlink_storage`` facts (empty when absent or unreadable)."""
    import json

    try:
        storage = json.loads(str(grid.attrs.get("envlink_storage", "{}")))
    except ValueError:
        return {}
    return storage if isinstance(storage, dict) else {}


def _cheap_reads(grid: xr.DataArray) -> bool:
    """Uncompressed contiguous storage read in whole rows: one process is faster.

    Such reads cost about a memory copy, less than forking readers and sending their
    series back; compressed or tiled reads are worth spreading over processes.
    """
    storage = _storage_info(grid)
    if storage.get("chunks") != "contiguous" or storage.get("compressed"):
        return False
    return grid.chunks is None or int(min(grid.chunks[2])) == grid.shape[2]


def read_cells(
    grid: xr.DataArray,
    flat: np.ndarray,
    *,
    progress: Callable[[int], object] | None = None,
    any_valid: np.ndarray | None = None,
) -> np.ndarray:
    """Series of the given flat cells, shape ``(len(flat), time)`` (see :func:`read_cells_near_gaps`).

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(8.0).reshape(2, 2, 2), lat=[0, 1], lon=[0, 1])
    >>> read_cells(g, np.array([3, 0])).tolist()
    [[3.0, 7.0], [0.0, 4.0]]
    """
    return read_cells_near_gaps(grid, flat, progress=progress, any_valid=any_valid, halo=None)[0]


class TileResults:
    """Where each tile's result goes: its cells' series into ``out``, its "has data" map
    into ``any_valid``, its ``nearest-valid`` candidates gathered; the one placement used
    by the reads here and on a cluster (:mod:`envlink.extract.cluster_read`)."""

    def __init__(self, out: np.ndarray, nx: int, any_valid: np.ndarray | None,
                 progress: Callable[[int], object] | None) -> None:
        self.out, self.nx, self.any_valid, self.progress = out, nx, any_valid, progress
        self.extra_cells: list[np.ndarray] = []
        self.extra_series: list[np.ndarray] = []

    def put(self, job: tuple, result: tuple[np.ndarray, ...]) -> None:
        """Place the result of one job of :func:`tile_jobs` (what :func:`read_rect` returns)."""
        sel, rmin, rmax, cmin, cmax, _ = job
        self.out[sel] = result[0]
        if self.any_valid is not None:
            self.any_valid[rmin:rmax, cmin:cmax] = result[1]
        if result[2].shape[1]:
            self.extra_cells.append((result[2][0] + rmin) * self.nx + result[2][1] + cmin)
            self.extra_series.append(result[3])
        if self.progress is not None:
            self.progress(sel.size)

    def done(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The series, the extra cells and their series."""
        if not self.extra_cells:
            return (self.out, np.array([], dtype=np.int64),
                    np.empty((0, self.out.shape[1]), dtype=self.out.dtype))
        return self.out, np.concatenate(self.extra_cells), np.concatenate(self.extra_series)


def read_cells_near_gaps(
    grid: xr.DataArray,
    flat: np.ndarray,
    *,
    progress: Callable[[int], object] | None = None,
    any_valid: np.ndarray | None = None,
    halo: tuple[int, int] | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Series of the given flat cells, shape ``(len(flat), time)``, float32 or float64.

    Parameters
    ----------
    grid : xarray.DataArray
        Normalised grid (numpy- or dask-backed, or lazily loaded from a file).
    flat : ndarray of int
        Unique flat cell indices ``iy * nx + ix``.
    progress : callable, optional
        Called with the number of cells gathered after each tile.
    any_valid : ndarray of int8, optional
        Shape ``(ny, nx)``, -1 where unknown; when given, set to 1 / 0 ("has data at
        some step" / "never has data") for every cell of every rectangle read (used
        to skip empty candidates of ``nearest-valid``).
    halo : (int, int), optional
        Also gather the cells with data within this many rows / columns of a cell
        lacking data at some step, from the rectangles already in memory
        (``nearest-valid`` candidates).

    Returns
    -------
    series : ndarray (len(flat), time)
    extra_cells : ndarray of int
        Flat indices of the cells gathered through ``halo`` (empty without it).
    extra_series : ndarray (len(extra_cells), time)

    Raises
    ------
    GridError
        A read fails (a damaged, truncated or vanished file): the message names the
        grid's file, the variable and the cells being read.
    """
    flat = np.asarray(flat, dtype=np.int64)
    nt, ny, nx = grid.shape
    dtype = np.float64 if grid.dtype == np.float64 else np.float32
    out = np.empty((flat.size, nt), dtype=dtype)
    if flat.size == 0:
        return out, np.array([], dtype=np.int64), np.empty((0, nt), dtype=dtype)
    fast = cell_reader(grid)
    if fast is not None:
        return _read_with(fast, grid, flat, dtype, progress, any_valid, halo)
    jobs, remote = tile_jobs(grid, flat, halo)
    volume = sum((j[2] - j[1]) * (j[4] - j[3]) for j in jobs) * nt * np.dtype(dtype).itemsize
    workers = 1 if remote else _workers(grid, volume, len(jobs))

    results = TileResults(out, nx, any_valid, progress)
    store, done = results.put, results.done
    if workers <= 1:
        from envlink.core.processes import release_freed_memory

        for job in jobs:
            try:
                result = read_rect(*job[5])
            except READ_ERRORS as exc:
                raise_read_error(grid, job, exc)
            store(job, result)
            if job[5][0].size >= _TRIM_VALUES:  # a large block was read and freed: not kept as memory
                release_freed_memory()
        return done()
    _read_shared(grid, jobs, workers, store)
    return done()


def _read_shared(grid: xr.DataArray, jobs: list[tuple], workers: int, store: Callable[[tuple, tuple], None]) -> None:
    """Read the jobs in ``workers - 1`` reader processes and in this process at once.

    This process takes a job itself whenever the readers have enough queued: it would
    otherwise only wait, and one reader process less is one copy less of the reading
    libraries in memory. The readers start while this process reads (their start-up
    costs no waiting).
    """
    import contextlib
    from concurrent.futures import FIRST_COMPLETED, Future, wait

    from envlink.core.processes import reader_pool, release_freed_memory

    here: contextlib.AbstractContextManager[object] = contextlib.nullcontext()
    if grid.chunks is not None:  # this process is one reader among the others: no dask threads
        import dask

        here = dask.config.set(scheduler="synchronous")

    todo = list(reversed(jobs))  # this process and the readers both take from the end
    pending: dict[Future, tuple] = {}

    def collect(futures: set[Future]) -> None:
        for fut in futures:
            job = pending.pop(fut)
            try:
                result = fut.result()
            except READ_ERRORS as exc:
                raise_read_error(grid, job, exc)
            store(job, result)

    with here, reader_pool(max(1, workers - 1)) as pool:
        while todo or pending:
            while todo and len(pending) < 2 * max(1, workers - 1):
                job = todo.pop()
                pending[pool.submit(read_rect, *job[5])] = job
            if todo:
                job = todo.pop()
                try:
                    result = read_rect(*job[5])
                except READ_ERRORS as exc:
                    raise_read_error(grid, job, exc)
                store(job, result)
                del result
                if job[5][0].size >= _TRIM_VALUES:  # the block read and freed: not kept as memory
                    release_freed_memory()
                collect({f for f in pending if f.done()})
            elif pending:
                collect(wait(set(pending), return_when=FIRST_COMPLETED).done)


def tile_jobs(grid: xr.DataArray, flat: np.ndarray, halo: tuple[int, int] | None) -> tuple[list[tuple], bool]:
    """The reads of :func:`read_cells_near_gaps`: one job per tile holding a needed cell.

    Each job is ``(sel, rmin, rmax, cmin, cmax, args)``: the positions in ``flat`` of
    the tile's cells, the rectangle they span, and the arguments of the read that
    gathers them (:func:`read_rect`). Also says whether the grid is remote (then each
    tile is one storage chunk).
    """
    nt, ny, nx = grid.shape
    dtype = np.float64 if grid.dtype == np.float64 else np.float32
    iy, ix = np.divmod(flat, nx)
    remote = _storage_info(grid).get("remote") is True
    # a remote grid is read one storage chunk (column of chunks along time) at a time, so
    # that only the chunks holding a needed cell are fetched
    ty, tx = storage_chunks(grid) if remote else _tiles(ny, nx, nt, np.dtype(dtype).itemsize, storage_chunks(grid))
    tile = (iy // ty) * ((nx + tx - 1) // tx) + ix // tx
    order = np.argsort(tile, kind="stable")
    tiles, starts = np.unique(tile[order], return_index=True)
    bounds = np.append(starts, order.size)
    ydim, xdim = grid.dims[1], grid.dims[2]
    ct = _time_chunk(grid)
    jobs = []
    for k in range(tiles.size):
        sel = order[bounds[k] : bounds[k + 1]]
        # read only the rectangle of the tile spanned by needed cells
        rmin, rmax = int(iy[sel].min()), int(iy[sel].max()) + 1
        cmin, cmax = int(ix[sel].min()), int(ix[sel].max()) + 1
        rect = grid.isel({ydim: slice(rmin, rmax), xdim: slice(cmin, cmax)})
        jobs.append((sel, rmin, rmax, cmin, cmax, (rect, iy[sel] - rmin, ix[sel] - cmin, dtype, ct, halo)))
    return jobs, remote


def cell_reader(grid: xr.DataArray) -> Callable[..., tuple[np.ndarray, np.ndarray, np.ndarray]] | None:
    """The grid's own cell reader, when its values come from a source that has one.

    A source may offer ``envlink_read_cells(iy, ix, *, progress, halo)`` on the lazy
    array behind the DataArray (a many-file archive does: it reads file by file, see
    docs/archives.md), returning the series of cells (iy, ix), the extra cells as
    (row, column) and their series, like :func:`read_cells_near_gaps`. It is used only
    while the DataArray still shows the whole source, unsliced and unchanged.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> cell_reader(make_grid(np.zeros((1, 1, 1)), lat=[0], lon=[0])) is None
    True
    """
    data = getattr(grid.variable, "_data", None)
    source = getattr(data, "array", None)
    read = getattr(source, "envlink_read_cells", None)
    key = getattr(getattr(data, "key", None), "tuple", None)
    if read is None or key is None or tuple(getattr(source, "shape", ())) != tuple(grid.shape):
        return None
    whole = all(isinstance(k, slice) and k.indices(n) == (0, n, 1) for k, n in zip(key, grid.shape, strict=True))
    return read if whole and len(key) == grid.ndim else None


def _read_with(read: Callable[..., tuple[np.ndarray, np.ndarray, np.ndarray]], grid: xr.DataArray,
               flat: np.ndarray, dtype: type, progress: Callable[[int], object] | None,
               any_valid: np.ndarray | None, halo: tuple[int, int] | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`read_cells_near_gaps` through the grid's own cell reader."""
    from envlink.errors import EnvlinkError, GridError

    nx = grid.shape[2]
    iy, ix = np.divmod(flat, nx)
    try:
        series, extra, extra_series = read(iy, ix, progress=progress, halo=halo)
    except EnvlinkError:
        raise
    except READ_ERRORS as exc:
        raise GridError(f"Cannot read the grid {grid_label(grid)}: {str(exc).strip() or type(exc).__name__}.") from exc
    extra_flat = extra[0] * nx + extra[1] if extra.size else np.array([], dtype=np.int64)
    if any_valid is not None:
        rows = np.concatenate([iy, extra[0]]) if extra.size else iy
        cols = np.concatenate([ix, extra[1]]) if extra.size else ix
        finite = np.concatenate([np.isfinite(series).any(axis=1), np.isfinite(extra_series).any(axis=1)])
        any_valid[rows, cols] = finite.astype(np.int8)
    return np.asarray(series, dtype=dtype), extra_flat, np.asarray(extra_series, dtype=dtype)


#: What netCDF4, h5netcdf, xarray, zarr and dask raise on a damaged or vanished file.
READ_ERRORS = (OSError, RuntimeError, ValueError, KeyError, EOFError)


def grid_label(grid: xr.DataArray) -> str:
    """The grid in words for messages: its file (and how many more), else its identity or name.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.zeros((1, 1, 1)), lat=[0], lon=[0])
    >>> g.attrs["envlink_identity"] = '{"files": [{"path": "/data/sst.nc"}], "variable": "sst"}'
    >>> grid_label(g)
    "'/data/sst.nc'"
    """
    import json

    text = grid.attrs.get("envlink_identity")
    try:
        ident = json.loads(text) if text else None
    except (TypeError, ValueError):
        ident = None
    files = ident.get("files") if isinstance(ident, dict) else None
    if isinstance(files, list) and files and isinstance(files[0], dict) and files[0].get("path"):
        more = f" (and {len(files) - 1} more files)" if len(files) > 1 else ""
        return repr(str(files[0]["path"])) + more
    if text:
        return f"{str(text)[:120]!r}"
    return repr(str(grid.name)) if grid.name is not None else "(an unnamed grid in memory)"


def raise_read_error(grid: xr.DataArray, job: tuple, exc: BaseException) -> NoReturn:
    """Raise a :class:`~envlink.errors.GridError` naming the grid, the variable and the
    cells being read (envlink's own errors go on as they are)."""
    from envlink.errors import EnvlinkError, GridError

    if isinstance(exc, EnvlinkError):
        raise exc
    _, rmin, rmax, cmin, cmax, _ = job
    ydim, xdim = grid.dims[1], grid.dims[2]
    variable = grid.attrs.get("envlink_variable", grid.name)
    reason = str(exc).strip() or type(exc).__name__
    rows = f"{rmin}" if rmax - rmin == 1 else f"{rmin}-{rmax - 1}"
    cols = f"{cmin}" if cmax - cmin == 1 else f"{cmin}-{cmax - 1}"
    raise GridError(
        f"Cannot read the grid {grid_label(grid)} (variable {variable!r}, cells at {ydim} index {rows}, "
        f"{xdim} index {cols}, all {grid.shape[0]} time steps): {reason}. The file may be damaged, "
        "truncated or changed since it was opened; check it with 'envlink grid' and open it again."
    ) from exc
