"""Reading one rectangle of a grid over all time steps: the work of one reader job.

:func:`read_rect` is what :mod:`envlink.extract.reader` runs for each tile, in this
process or in a reader process (:mod:`envlink.core.processes`), and what
:mod:`envlink.extract.cluster_read` runs as a task on a cluster's workers. It
imports nothing heavy itself: a reader process needs only the libraries of the grid.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["read_rect", "multiprocessing_child"]

_TILE_BYTES = 32 * 2**20


def read_rect(
    rect: Any, ly: np.ndarray, lx: np.ndarray, dtype: type, ct: int, halo: tuple[int, int] | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Gather cells (ly, lx) of a rectangle (an ``xarray.DataArray``) over all time steps, in time slabs.

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
