"""Reading the full time series of selected cells from a (possibly lazy) grid.

Cells are read by rectangular tiles aligned to the storage chunks (dask chunks, or
the netCDF/HDF5 ``chunksizes`` encoding), and only tiles that hold a needed cell are
read; every tile is read once, with all time steps (in time slabs of about 32 MiB),
then the needed cells are gathered from it with NumPy. Large lazy grids (more than
128 MiB to read) are read by several processes, one tile each (as many as cores, or
``$ENVLINK_READ_WORKERS``); each returns only the gathered cells. This avoids per-site ``.sel`` loops and the
outer-product indexing that pointwise selection on a lazy array turns into.
"""

from __future__ import annotations

import os
from collections.abc import Callable

import numpy as np
import xarray as xr

__all__ = ["read_cells", "read_cells_near_gaps", "storage_chunks"]

_TILE_BYTES = 32 * 2**20
_PARALLEL_BYTES = 128 * 2**20


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


def _cheap_reads(grid: xr.DataArray) -> bool:
    """Uncompressed contiguous storage read in whole rows: one process is faster.

    Such reads cost about a memory copy, less than forking readers and sending their
    series back; compressed or tiled reads are worth spreading over processes.
    """
    import json

    try:
        storage = json.loads(str(grid.attrs.get("envlink_storage", "{}")))
    except ValueError:
        return False
    if not isinstance(storage, dict) or storage.get("chunks") != "contiguous" or storage.get("compressed"):
        return False
    return grid.chunks is None or int(min(grid.chunks[2])) == grid.shape[2]


def _read_rect(
    rect: xr.DataArray, ly: np.ndarray, lx: np.ndarray, dtype: type, ct: int, halo: tuple[int, int] | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Gather cells (ly, lx) of a rectangle over all time steps, in time slabs.

    With ``halo = (ky, kx)`` (and the rectangle read in one slab), also gathers every
    other cell with some data that lies within (ky, kx) cells of a cell lacking data
    at some step: the cells a ``nearest-valid`` search may need.
    """
    import contextlib

    nt = rect.shape[0]
    step_bytes = rect.shape[1] * rect.shape[2] * np.dtype(dtype).itemsize
    # time slabs (aligned to the time chunks) keep memory bounded on time-chunked files
    slab = max(ct, (_TILE_BYTES // max(step_bytes, 1)) // ct * ct)
    out: np.ndarray = np.empty((ly.size, nt), dtype=dtype)
    seen = np.zeros(rect.shape[1:], dtype=bool)
    ctx: contextlib.AbstractContextManager[object] = contextlib.nullcontext()
    if rect.chunks is not None and multiprocessing_child():
        import dask

        ctx = dask.config.set(scheduler="synchronous")
    ey = ex = np.array([], dtype=np.int64)
    extra: np.ndarray = np.empty((0, nt), dtype=dtype)
    block: np.ndarray = np.empty((0, 0, 0), dtype=dtype)
    finite: np.ndarray = np.empty((0, 0, 0), dtype=bool)
    with ctx:
        for t0 in range(0, nt, slab):
            block = np.asarray(rect.isel(time=slice(t0, t0 + slab)).values, dtype=dtype)
            out[:, t0 : t0 + block.shape[0]] = block[:, ly, lx].T
            finite = np.isfinite(block)
            seen |= finite.any(axis=0)
        if halo is not None and slab >= nt:
            near_gap = _dilate(np.asarray(~finite.all(axis=0)), halo[0], halo[1])
            want = near_gap & seen
            want[ly, lx] = False
            ey, ex = np.nonzero(want)
            extra = np.ascontiguousarray(block[:, ey, ex].T)
    return out, seen, np.stack([ey, ex]) if ey.size else np.zeros((2, 0), dtype=np.int64), extra


def _dilate(mask: np.ndarray, ky: int, kx: int) -> np.ndarray:
    """Cells within (ky, kx) rows / columns of a True cell (box dilation, integral image).

    Examples
    --------
    >>> _dilate(np.array([[False, False, False], [False, True, False]]), 0, 1).astype(int).tolist()
    [[0, 0, 0], [1, 1, 1]]
    """
    ny, nx = mask.shape
    ii = np.zeros((ny + 1, nx + 1), dtype=np.int64)
    np.cumsum(np.cumsum(mask, axis=0), axis=1, out=ii[1:, 1:])
    y0 = np.clip(np.arange(ny) - ky, 0, ny)
    y1 = np.clip(np.arange(ny) + ky + 1, 0, ny)
    x0 = np.clip(np.arange(nx) - kx, 0, nx)
    x1 = np.clip(np.arange(nx) + kx + 1, 0, nx)
    count = ii[y1][:, x1] - ii[y0][:, x1] - ii[y1][:, x0] + ii[y0][:, x0]
    return count > 0


def multiprocessing_child() -> bool:
    """True in a worker process of a pool."""
    import multiprocessing

    return multiprocessing.parent_process() is not None


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
    """
    flat = np.asarray(flat, dtype=np.int64)
    nt, ny, nx = grid.shape
    dtype = np.float64 if grid.dtype == np.float64 else np.float32
    out = np.empty((flat.size, nt), dtype=dtype)
    if flat.size == 0:
        return out, np.array([], dtype=np.int64), np.empty((0, nt), dtype=dtype)
    iy, ix = np.divmod(flat, nx)
    ty, tx = _tiles(ny, nx, nt, np.dtype(dtype).itemsize, storage_chunks(grid))
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
    volume = sum((j[2] - j[1]) * (j[4] - j[3]) for j in jobs) * nt * np.dtype(dtype).itemsize
    workers = _workers(grid, volume, len(jobs))

    extra_cells: list[np.ndarray] = []
    extra_series: list[np.ndarray] = []

    def store(job: tuple, result: tuple[np.ndarray, ...]) -> None:
        sel, rmin, rmax, cmin, cmax, _ = job
        out[sel] = result[0]
        if any_valid is not None:
            any_valid[rmin:rmax, cmin:cmax] = result[1]
        if result[2].shape[1]:
            extra_cells.append((result[2][0] + rmin) * nx + result[2][1] + cmin)
            extra_series.append(result[3])
        if progress is not None:
            progress(sel.size)

    def done() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if not extra_cells:
            return out, np.array([], dtype=np.int64), np.empty((0, nt), dtype=dtype)
        return out, np.concatenate(extra_cells), np.concatenate(extra_series)

    if workers <= 1:
        for job in jobs:
            store(job, _read_rect(*job[5]))
        return done()
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    if grid.chunks is not None:
        # dask imports its scheduler machinery on first use; do it once here, so forked
        # readers share it instead of each importing it again
        import dask.base

        dask.base.get_scheduler()

    ctx = multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
        futures = {pool.submit(_read_rect, *job[5]): job for job in jobs}
        for fut in as_completed(futures):
            store(futures[fut], fut.result())
    return done()
    return out
