"""Reading the full time series of selected cells from a (possibly lazy) grid.

Cells are read by rectangular tiles aligned to the storage chunks (dask chunks, or
the netCDF/HDF5 ``chunksizes`` encoding), and only tiles that hold a needed cell are
read; every tile is read once, with all time steps, then the needed cells are
gathered from it with NumPy. This avoids per-site ``.sel`` loops and the
outer-product indexing that pointwise selection on a lazy array turns into.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import xarray as xr

__all__ = ["read_cells", "storage_chunks"]

_TILE_BYTES = 64 * 2**20


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


def read_cells(
    grid: xr.DataArray,
    flat: np.ndarray,
    *,
    progress: Callable[[int], object] | None = None,
    any_valid: np.ndarray | None = None,
) -> np.ndarray:
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

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(8.0).reshape(2, 2, 2), lat=[0, 1], lon=[0, 1])
    >>> read_cells(g, np.array([3, 0])).tolist()
    [[3.0, 7.0], [0.0, 4.0]]
    """
    flat = np.asarray(flat, dtype=np.int64)
    nt, ny, nx = grid.shape
    dtype = np.float64 if grid.dtype == np.float64 else np.float32
    out = np.empty((flat.size, nt), dtype=dtype)
    if flat.size == 0:
        return out
    iy, ix = np.divmod(flat, nx)
    ty, tx = _tiles(ny, nx, nt, np.dtype(dtype).itemsize, storage_chunks(grid))
    tile = (iy // ty) * ((nx + tx - 1) // tx) + ix // tx
    order = np.argsort(tile, kind="stable")
    tiles, starts = np.unique(tile[order], return_index=True)
    bounds = np.append(starts, order.size)
    ydim, xdim = grid.dims[1], grid.dims[2]
    ct = _time_chunk(grid)
    for k in range(tiles.size):
        sel = order[bounds[k] : bounds[k + 1]]
        # read only the rectangle of the tile spanned by needed cells
        rmin, rmax = int(iy[sel].min()), int(iy[sel].max()) + 1
        cmin, cmax = int(ix[sel].min()), int(ix[sel].max()) + 1
        rect = grid.isel({ydim: slice(rmin, rmax), xdim: slice(cmin, cmax)})
        step_bytes = (rmax - rmin) * (cmax - cmin) * np.dtype(dtype).itemsize
        # time slabs (aligned to the time chunks) keep memory bounded on time-chunked files
        slab = max(ct, (_TILE_BYTES // max(step_bytes, 1)) // ct * ct)
        seen = np.zeros((rmax - rmin, cmax - cmin), dtype=bool)
        for t0 in range(0, nt, slab):
            block = np.asarray(rect.isel(time=slice(t0, t0 + slab)).values, dtype=dtype)
            out[sel, t0 : t0 + block.shape[0]] = block[:, iy[sel] - rmin, ix[sel] - cmin].T
            if any_valid is not None:
                seen |= np.isfinite(block).any(axis=0)
        if any_valid is not None:
            any_valid[rmin:rmax, cmin:cmax] = seen
        if progress is not None:
            progress(sel.size)
    return out
