"""Reading a many-file archive: file by file, only the needed cells, decoded as one file is.

An archive (:mod:`envlink.grids.archive`) is a normalised grid whose values live in
many netCDF files along time. :class:`ArchiveArray` is its lazy array: any selection
reads, from each file that holds a selected step, the rectangle of stored rows and
columns that spans the selected cells, then decodes the stored values with the very
functions that decode a single file (:func:`envlink.grids.conventions.decode_values`
and :func:`envlink.grids.units.convert_units`), so both give the same floats, bit for
bit. :meth:`ArchiveArray.envlink_read_cells` is the fast path the extraction's reader
takes (see :mod:`envlink.extract.reader`): the files are shared among worker
processes (one per core, ``$ENVLINK_READ_WORKERS`` at most; small jobs stay in this
process), each reads per file the rectangle of the needed cells within each storage
chunk and sends back only the gathered stored values; they are decoded once here.

A file that fails to read, or that changed since the archive was opened, is a
:class:`~envlink.errors.GridError` naming it.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

from envlink.errors import GridError, ValidRangeWarning
from envlink.grids.conventions import decode_values
from envlink.grids.units import Conversion, convert_units

__all__ = ["ArchiveSpec", "ArchiveArray", "read_block"]

#: Below this many stored bytes to read in all, the files are read in this process.
_PARALLEL_BYTES = 32 * 2**20
_READ_ERRORS = (OSError, RuntimeError, ValueError, KeyError, IndexError, EOFError)


@dataclass(frozen=True)
class ArchiveSpec:
    """Where each value of an archive lies and how it is decoded.

    ``paths`` (in time order) with their ``stamps`` (size, mtime in ns) at opening;
    ``dims``: the stored dims of ``variable``, of which ``tdim`` / ``ydim`` / ``xdim``
    are time and space and ``picks`` gives the position along any other; ``iy`` /
    ``ix``: the stored row / column of each normalised one; ``file_of`` / ``local``:
    the file and stored step of each normalised step; ``raw_attrs``, ``conv``,
    ``per_step`` and ``days``: the decoding; ``chunks``: the storage chunk of the
    (row, column) dims, or None for contiguous storage.
    """

    paths: tuple[str, ...]
    stamps: tuple[tuple[int, int], ...]
    variable: str
    dims: tuple[str, ...]
    tdim: str
    ydim: str
    xdim: str
    picks: dict[str, int]
    iy: np.ndarray
    ix: np.ndarray
    file_of: np.ndarray
    local: np.ndarray
    raw_attrs: dict[str, Any]
    raw_dtype: np.dtype
    dtype: np.dtype
    conv: Conversion
    per_step: bool
    days: np.ndarray | None
    chunks: tuple[int, int] | None


def _check_unchanged(path: str, stamp: tuple[int, int]) -> None:
    try:
        st = os.stat(path)
    except OSError as exc:
        raise GridError(f"Cannot read the grid file {path!r}: {exc.strerror or exc}. It was there when "
                        "the archive was opened; open it again.") from None
    if (st.st_size, st.st_mtime_ns) != stamp:
        raise GridError(f"The grid file {path!r} changed since the archive was opened (size or "
                        "modification time differ); open the archive again.")


def read_block(spec: ArchiveSpec, f: int, local: np.ndarray, rows: slice, cols: slice) -> np.ndarray:
    """Stored values of file ``f`` at its steps ``local`` over ``rows`` x ``cols``, as (step, row, col)."""
    import netCDF4

    path = spec.paths[f]
    _check_unchanged(path, spec.stamps[f])
    lo, hi = int(local.min()), int(local.max()) + 1
    key: list[Any] = []
    keep: list[str] = []
    for d in spec.dims:
        if d == spec.tdim:
            key.append(slice(lo, hi))
        elif d in (spec.ydim, spec.xdim):
            key.append(rows if d == spec.ydim else cols)
        else:
            key.append(spec.picks.get(d, 0))
            continue
        keep.append(d)
    try:
        with netCDF4.Dataset(path) as nc:
            var = nc.variables[spec.variable]
            var.set_auto_maskandscale(False)
            var.set_always_mask(False)
            block = np.asarray(var[tuple(key)])
    except _READ_ERRORS as exc:
        reason = str(exc).strip() or type(exc).__name__
        raise GridError(
            f"Cannot read the grid file {path!r} (variable {spec.variable!r}, stored rows "
            f"{rows.start}-{rows.stop - 1}, columns {cols.start}-{cols.stop - 1}): {reason}. The file may be "
            "damaged or truncated; check it with 'envlink grid'."
        ) from None
    block = block.transpose([keep.index(spec.tdim), keep.index(spec.ydim), keep.index(spec.xdim)])
    return block[local - lo]


def decode(spec: ArchiveSpec, raw: np.ndarray, steps: np.ndarray, time_axis: int) -> np.ndarray:
    """Decode stored values (``steps``: the normalised steps along ``time_axis``) as a single file is."""
    dims = tuple("time" if i == time_axis else f"d{i}" for i in range(raw.ndim))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidRangeWarning)  # said once, when the archive was opened
        values, _ = decode_values(xr.DataArray(raw, dims=dims), spec.raw_attrs, name=spec.variable)
    days = spec.days[steps] if spec.per_step and spec.days is not None else None
    values = convert_units(values, spec.conv, spec.per_step, days)
    return np.asarray(values.values, dtype=spec.dtype)


def _rects(ry: np.ndarray, rx: np.ndarray, chunks: tuple[int, int] | None) -> list[tuple[slice, slice, np.ndarray]]:
    """Rectangles to read: per storage chunk holding a cell, the box of its cells (one box if contiguous)."""
    if ry.size == 0:
        return []
    cy, cx = chunks if chunks is not None else (1 << 40, 1 << 40)
    tile = (ry // cy) * (1 << 32) + rx // cx
    order = np.argsort(tile, kind="stable")
    _, starts = np.unique(tile[order], return_index=True)
    out = []
    for sel in np.split(order, starts[1:]):
        r0, r1, c0, c1 = int(ry[sel].min()), int(ry[sel].max()) + 1, int(rx[sel].min()), int(rx[sel].max()) + 1
        out.append((slice(r0, r1), slice(c0, c1), sel))
    return out


def _gather_files(spec: ArchiveSpec, files: Sequence[int], steps: Sequence[np.ndarray], ry: np.ndarray,
                  rx: np.ndarray) -> list[np.ndarray]:
    """Per file, the stored values of cells (ry, rx) at its normalised ``steps``: (cells, steps)."""
    rects = _rects(ry, rx, spec.chunks)
    out = []
    for f, st in zip(files, steps, strict=True):
        got = np.empty((ry.size, st.size), dtype=spec.raw_dtype)
        for rows, cols, sel in rects:
            block = read_block(spec, f, spec.local[st], rows, cols)
            got[sel] = block[:, ry[sel] - rows.start, rx[sel] - cols.start].T
        out.append(got)
    return out


def _file_steps(spec: ArchiveSpec) -> tuple[np.ndarray, list[np.ndarray]]:
    """The files in time order and, for each, its normalised steps."""
    order = np.argsort(spec.file_of, kind="stable")
    files, starts = np.unique(spec.file_of[order], return_index=True)
    return files, np.split(order, starts[1:])


def _workers(spec: ArchiveSpec, n_files: int, volume: int) -> int:
    if volume < _PARALLEL_BYTES or n_files < 8:
        return 1
    env = os.environ.get("ENVLINK_READ_WORKERS")
    n = int(env) if env and env.isdigit() else (os.cpu_count() or 1)
    return max(1, min(n, 16, n_files))


def gather(spec: ArchiveSpec, ry: np.ndarray, rx: np.ndarray,
           progress: Callable[[int], object] | None = None, total: int | None = None) -> np.ndarray:
    """Stored values of cells (ry, rx) at every step, (cells, steps), read file by file.

    ``progress`` is told, as files are read, shares of ``total`` (default: the cells)."""
    total = ry.size if total is None else total
    files, steps = _file_steps(spec)
    raw = np.empty((ry.size, spec.file_of.size), dtype=spec.raw_dtype)
    rects = _rects(ry, rx, spec.chunks)
    per_file = sum((r.stop - r.start) * (c.stop - c.start) for r, c, _ in rects) * spec.raw_dtype.itemsize
    volume = per_file * spec.file_of.size
    workers = _workers(spec, files.size, volume)
    batches = np.array_split(np.arange(files.size), min(files.size, max(1, workers * 8)))
    done = 0
    read_files = [0]

    def store(batch: np.ndarray, parts: list[np.ndarray]) -> None:
        nonlocal done
        for k, part in zip(batch, parts, strict=True):
            raw[:, steps[k]] = part
        if progress is not None and total:
            read_files[0] += batch.size  # batches end in any order
            now = total * read_files[0] // files.size
            progress(now - done)
            done = now

    if workers <= 1:
        for b in batches:
            if b.size:
                store(b, _gather_files(spec, files[b].tolist(), [steps[k] for k in b], ry, rx))
        return raw
    from envlink.core.processes import run_shared

    batches = [b for b in batches if b.size]
    jobs = [(spec, files[b].tolist(), [steps[k] for k in b], ry, rx) for b in batches]
    # this process reads too, while the readers start
    run_shared(_gather_files, jobs, workers - 1, lambda k, parts: store(batches[k], parts))
    return raw


class ArchiveArray(BackendArray):
    """The lazy values of an archive in normalised order (time, row, column); see the module."""

    def __init__(self, spec: ArchiveSpec) -> None:
        self.spec = spec
        self.shape = (int(spec.file_of.size), int(spec.iy.size), int(spec.ix.size))
        self.dtype = spec.dtype

    def __getitem__(self, key: indexing.ExplicitIndexer) -> Any:
        return indexing.explicit_indexing_adapter(key, self.shape, indexing.IndexingSupport.OUTER, self._outer)

    def _outer(self, key: tuple[Any, ...]) -> np.ndarray:
        idx = [np.arange(n)[k] for k, n in zip(key, self.shape, strict=True)]
        t, y, x = (np.atleast_1d(i) for i in idx)
        out = np.empty((t.size, y.size, x.size), dtype=self.dtype)
        if out.size:
            spec = self.spec
            ry, rx = spec.iy[y], spec.ix[x]
            rows, cols = slice(int(ry.min()), int(ry.max()) + 1), slice(int(rx.min()), int(rx.max()) + 1)
            raw = np.empty(out.shape, dtype=spec.raw_dtype)
            for f in np.unique(spec.file_of[t]):
                sel = np.nonzero(spec.file_of[t] == f)[0]
                block = read_block(spec, int(f), spec.local[t[sel]], rows, cols)
                raw[sel] = block[:, ry - rows.start][:, :, rx - cols.start]
            out = decode(spec, raw, t, 0)
        return out[tuple(0 if np.ndim(i) == 0 else slice(None) for i in idx)]

    def envlink_read_cells(self, iy: np.ndarray, ix: np.ndarray, *, progress: Callable[[int], object] | None = None,
                           halo: tuple[int, int] | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every step of normalised cells (iy, ix), read file by file (see the module).

        With ``halo = (ky, kx)``, also the cells with data in the first step that lie
        within (ky, kx) cells of a requested cell without data in that step: the
        candidates a ``nearest-valid`` search reads next. Returns the series
        ``(cells, steps)``, the extra cells as (row, column) and their series.
        """
        spec = self.spec
        ey = ex = np.array([], dtype=np.int64)
        if halo is not None and iy.size:
            ey, ex = self._near_gaps(iy, ix, halo)
        ay, ax = np.concatenate([iy, ey]), np.concatenate([ix, ex])
        raw = gather(spec, spec.iy[ay], spec.ix[ax], progress, total=iy.size)
        series = decode(spec, raw, np.arange(raw.shape[1]), 1)
        return series[: iy.size], np.stack([ey, ex]), series[iy.size :]

    def _near_gaps(self, iy: np.ndarray, ix: np.ndarray, halo: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
        """Cells with data at the first step within ``halo`` of a requested cell without."""
        ky, kx = halo
        ny, nx = self.shape[1], self.shape[2]
        r0, r1 = max(int(iy.min()) - ky, 0), min(int(iy.max()) + ky + 1, ny)
        c0, c1 = max(int(ix.min()) - kx, 0), min(int(ix.max()) + kx + 1, nx)
        first = np.asarray(self._outer((np.array([0]), np.arange(r0, r1), np.arange(c0, c1)))[0])
        has = np.isfinite(first)
        lacking = ~has[iy - r0, ix - c0]
        if not lacking.any():
            return np.array([], dtype=np.int64), np.array([], dtype=np.int64)
        near = np.zeros_like(has)
        for y, x in zip(iy[lacking] - r0, ix[lacking] - c0, strict=True):
            near[max(y - ky, 0): y + ky + 1, max(x - kx, 0): x + kx + 1] = True
        near &= has
        near[iy - r0, ix - c0] = False
        ey, ex = np.nonzero(near)
        return ey + r0, ex + c0
