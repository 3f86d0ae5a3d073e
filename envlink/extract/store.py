"""The cell-series store: each grid cell's whole series, kept on disk by grid identity and cell.

The first request on a file-backed grid reads each needed cell's whole series once
(:mod:`envlink.extract.reader`) and keeps it here; any later request on those cells
(another window, statistic, baseline, lag, threshold or spatial rule, more rows at
the same cells) reads the store instead of the grid. It is keyed by the grid, not by
the request:

- **Where.** ``$ENVLINK_CACHE/cells`` (``cache_dir=`` in Python, ``[project]
  cache_dir`` in a project file), else ``$XDG_CACHE_HOME/envlink/cells``, else
  ``~/.cache/envlink/cells``. Never inside the installed package.
- **Key.** One folder per grid: a SHA-256 over the grid's identity (its files' paths,
  sizes, modification times and content hashes, the variable and its attributes:
  ``attrs["envlink_identity"]``), its normalised shape, dtype, attributes and
  coordinates, and the source of envlink's decoding code. A file changed under the
  same name has another identity, so it gets a new folder, and the folder of its old
  contents is removed. Grids held only in memory (no file) are not stored.
- **Files.** Immutable segments (:mod:`envlink.extract.segments`), each the sorted
  cells, the cells known to hold no data, and their series (float32 or float64 as
  read), memory-mapped on use; written to a temporary file and renamed, so a run
  killed mid-write leaves a whole segment or none, and two runs at once at worst
  write the same cells twice. More than :data:`~envlink.extract.storefiles.MAX_SEGMENTS`
  segments of one grid are merged into one.
- **Size.** At most ``$ENVLINK_STORE_MAX`` bytes in all (default 2 GiB; ``500M``,
  ``4G``... ; ``0`` turns storing off): after each write the least recently used
  segments (a run touches those it reads) are removed until it fits.

The store never fails a run: a folder that cannot be written gives a
:class:`~envlink.errors.CacheWarning` and the values are computed without it; a
damaged segment is removed and its cells read from the grid again.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import re
import shutil
import warnings
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from envlink.errors import CacheWarning, user_stacklevel
from envlink.extract.segments import Segment, read_segment, write_segment
from envlink.extract.storefiles import (
    GRID_FILE,
    MAX_SEGMENTS,
    compact,
    evict,
    remove_stale,
    segment_files,
)

__all__ = ["GridStore", "cache_root", "store_root", "store_limit", "grid_key", "decoding_code_hash",
           "decoding_files", "DEFAULT_LIMIT", "FORMAT"]

#: Layout version of the store (part of every key).
FORMAT = 1
#: Default size limit of the whole store, bytes (2 GiB).
DEFAULT_LIMIT = 2 * 2**30
_UNITS = {"": 1, "b": 1, "k": 2**10, "kb": 2**10, "kib": 2**10, "m": 2**20, "mb": 2**20, "mib": 2**20,
          "g": 2**30, "gb": 2**30, "gib": 2**30, "t": 2**40, "tb": 2**40, "tib": 2**40}


def cache_root(cache_dir: str | os.PathLike[str] | None = None) -> Path:
    """envlink's cache folder: ``cache_dir``, else ``$ENVLINK_CACHE``, else the user's cache.

    The user's cache is ``$XDG_CACHE_HOME/envlink``, else ``~/.cache/envlink``.

    Examples
    --------
    >>> cache_root("/tmp/somewhere").as_posix()
    '/tmp/somewhere'
    """
    if cache_dir is not None:
        return Path(cache_dir)
    env = os.environ.get("ENVLINK_CACHE")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME")
    return (Path(base) if base else Path.home() / ".cache") / "envlink"


def store_root(cache_dir: str | os.PathLike[str] | None = None) -> Path:
    """The cell-series store's folder: ``cells`` in :func:`cache_root`."""
    return cache_root(cache_dir) / "cells"


def store_limit(text: str | None = None) -> int:
    """The store's size limit in bytes from ``$ENVLINK_STORE_MAX`` (or ``text``); default 2 GiB.

    Examples
    --------
    >>> store_limit("500M"), store_limit("1.5 GiB"), store_limit("0")
    (524288000, 1610612736, 0)
    """
    text = os.environ.get("ENVLINK_STORE_MAX") if text is None else text
    if text is None or not text.strip():
        return DEFAULT_LIMIT
    m = re.fullmatch(r"\s*(\d+(?:\.\d*)?)\s*([a-zA-Z]*)\s*", text)
    if not m or m.group(2).lower() not in _UNITS:
        warnings.warn(f"ENVLINK_STORE_MAX={text!r} is not a size such as '2G' or '500M'; the default 2G is used.",
                      CacheWarning, stacklevel=user_stacklevel())
        return DEFAULT_LIMIT
    return int(float(m.group(1)) * _UNITS[m.group(2).lower()])


_CODE_HASH: str | None = None


def decoding_code_hash() -> str:
    """SHA-256 over the source of the code that turns files into stored series (once per process).

    The files are :func:`envlink.extract.codehash.decoding_files`: the grid reading
    (:mod:`envlink.grids.open` and what it imports in ``envlink/grids``,
    ``envlink/core``, ``envlink/errors.py``, ``envlink/geo.py``), the cell reader and
    the store's own modules, so series stored by other decoding code are not served
    after it changes (a new statistic or window keeps them).

    Examples
    --------
    >>> len(decoding_code_hash())
    64
    """
    global _CODE_HASH
    if _CODE_HASH is None:
        from envlink.extract.codehash import source_hash

        _CODE_HASH = source_hash(decoding_files())
    return _CODE_HASH


def decoding_files() -> list[Path]:
    """The source files :func:`decoding_code_hash` reads, sorted by their path in the package."""
    from envlink.extract.codehash import decoding_files as files

    return files()


def _identity(grid: xr.DataArray) -> dict[str, Any] | None:
    try:
        ident = json.loads(str(grid.attrs.get("envlink_identity") or "null"))
    except ValueError:
        return None
    return ident if isinstance(ident, dict) and ident.get("files") else None


def _coord_bytes(values: np.ndarray) -> bytes:
    v = np.asarray(values)
    if v.dtype.kind in "mM":
        v = v.astype("datetime64[ns]").view(np.int64) if v.dtype.kind == "M" else v.view(np.int64)
    elif v.dtype.kind == "O":
        v = v.astype(str)
    return np.ascontiguousarray(v).tobytes() + str(v.dtype).encode()


def grid_key(grid: xr.DataArray) -> str | None:
    """The store key of a grid (hex), or None for a grid without files (held in memory)."""
    ident = _identity(grid)
    if ident is None:
        return None
    h = hashlib.sha256(f"envlink cell store {FORMAT}\n".encode())
    h.update(str(grid.attrs["envlink_identity"]).encode())
    attrs = {k: str(v) for k, v in grid.attrs.items() if k not in ("envlink_identity", "envlink_storage")}
    h.update(json.dumps(attrs, sort_keys=True).encode())
    h.update(repr((grid.name, tuple(grid.dims), tuple(grid.shape), str(grid.dtype))).encode())
    for name in sorted(str(c) for c in grid.coords):
        h.update(name.encode() + b"\0" + _coord_bytes(grid[name].values))
    h.update(decoding_code_hash().encode())
    return h.hexdigest()[:40]


def _meta(grid: xr.DataArray, key: str) -> dict[str, Any]:
    ident = _identity(grid) or {}
    files = [{k: f.get(k) for k in ("path", "size", "mtime", "sha256")} for f in ident.get("files", [])
             if isinstance(f, dict)]
    span: list[str] = []
    if "time" in grid.coords and grid.sizes.get("time", 0):
        t = grid["time"].values
        span = [str(t[0])[:10], str(t[-1])[:10]]
    return {"format": FORMAT, "key": key, "variable": str(grid.attrs.get("envlink_variable", grid.name)),
            "files": files, "shape": list(grid.shape), "dims": list(grid.dims), "dtype": str(grid.dtype),
            "time_span": span, "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")}


class GridStore:
    """The store of one grid: its segments, looked up by cell; new series added as segments.

    Build it with :meth:`for_grid`; the segments present then are the ones it serves
    (a run does not see segments other runs write meanwhile).
    """

    def __init__(self, root: Path, key: str, meta: dict[str, Any], limit: int) -> None:
        self.root, self.key, self.meta, self.limit = root, key, meta, limit
        self.folder = root / key
        self.segments: list[Segment] = []
        self._touched: set[Path] = set()
        self._load()

    @classmethod
    def for_grid(cls, grid: xr.DataArray, cache_dir: str | os.PathLike[str] | None = None) -> GridStore | None:
        """The store of ``grid`` under ``cache_dir`` (see :func:`store_root`); None for in-memory grids."""
        key = grid_key(grid)
        if key is None:
            return None
        return cls(store_root(cache_dir), key, _meta(grid, key), store_limit())

    def _load(self) -> None:
        if not self.folder.is_dir():
            return
        remove_stale(self.folder)
        for e in segment_files(self.folder):
            try:
                seg = read_segment(Path(e.path))
            except OSError:  # removed by another run meanwhile
                continue
            if seg is None:  # damaged: repair by removing it; its cells are read again
                Path(e.path).unlink(missing_ok=True)
                continue
            self.segments.append(seg)

    @property
    def known_empty(self) -> np.ndarray:
        """Cells known to hold no data at any time step (sorted)."""
        parts = [s.empty for s in self.segments if s.empty.size]
        return np.unique(np.concatenate(parts)) if parts else np.array([], dtype=np.int64)

    def lookup(self, cells: np.ndarray) -> list[tuple[Segment, np.ndarray, np.ndarray]]:
        """Where the store holds ``cells``: (segment, positions in ``cells``, rows in the segment).

        Each cell is found at most once (newest segment first).
        """
        cells = np.asarray(cells, dtype=np.int64)
        left = np.ones(cells.size, dtype=bool)
        out = []
        for seg in reversed(self.segments):
            if not left.any() or seg.cells.size == 0:
                continue
            idx = np.nonzero(left)[0]
            pos = np.minimum(np.searchsorted(seg.cells, cells[idx]), seg.cells.size - 1)
            hit = seg.cells[pos] == cells[idx]
            if hit.any():
                out.append((seg, idx[hit], pos[hit]))
                left[idx[hit]] = False
        return out

    def touch(self, seg: Segment) -> None:
        """Mark a segment used now (least-recently-used eviction), once per run."""
        if seg.path not in self._touched:
            self._touched.add(seg.path)
            try:
                os.utime(seg.path)
            except OSError:
                pass

    def add(self, cells: np.ndarray, empty: np.ndarray, nt: int, dtype: np.dtype,
            blocks: Iterable[np.ndarray] | Callable[[], Iterable[np.ndarray]]) -> str:
        """Store the series of ``cells`` (sorted) and the cells known ``empty`` as a new segment.

        Returns ``"stored"``, ``"over limit"`` (the segment alone exceeds the size limit)
        or ``"not stored"`` (the folder cannot be written: a :class:`CacheWarning`).
        """
        size = 64 + 8 * (cells.size + empty.size) + cells.size * nt * np.dtype(dtype).itemsize
        if size > self.limit:
            return "over limit"
        try:
            self.prepare_folder()
            path = write_segment(self.folder, cells, empty, nt, np.dtype(dtype), blocks)
        except OSError as exc:
            reason = (exc.strerror if exc.strerror else str(exc)) or type(exc).__name__
            warnings.warn(
                f"The cache at {str(self.root.parent)!r} could not be written ({reason}); the cell series were not "
                "cached. Point $ENVLINK_CACHE (or cache_dir=) at a writable folder, or pass --no-cache.",
                CacheWarning, stacklevel=user_stacklevel(),
            )
            return "not stored"
        self.tidy(path)
        return "stored"

    def prepare_folder(self) -> None:
        """Create the grid's folder and ``grid.json``; remove the folders of files changed since."""
        if (self.folder / GRID_FILE).is_file():
            return
        self.folder.mkdir(parents=True, exist_ok=True)
        tmp = self.folder / f".tmp-{os.getpid()}-grid.json"
        tmp.write_text(json.dumps(self.meta, indent=1), encoding="utf-8")
        os.replace(tmp, self.folder / GRID_FILE)
        self._drop_changed_files()

    def _drop_changed_files(self) -> None:
        """Remove the stores of earlier contents of this grid's files (same path, other file)."""
        mine = {f["path"]: f for f in self.meta["files"] if f.get("path")}
        for other in self.root.iterdir():
            if other == self.folder or not (other / GRID_FILE).is_file():
                continue
            try:
                meta = json.loads((other / GRID_FILE).read_text(encoding="utf-8"))
            except (OSError, ValueError):
                continue
            if not isinstance(meta, dict) or meta.get("variable") != self.meta["variable"]:
                continue
            for f in meta.get("files", []):
                now = mine.get(f.get("path")) if isinstance(f, dict) else None
                if now is not None and any(now.get(k) != f.get(k) for k in ("size", "mtime", "sha256")):
                    shutil.rmtree(other, ignore_errors=True)
                    break

    def tidy(self, written: Path | None = None) -> None:
        """Merge many segments into one; keep the whole store under its size limit.

        ``written`` (default: the newest segment) is the last to be evicted.
        """
        try:
            entries = segment_files(self.folder)
            if written is None and entries:
                written = Path(entries[-1].path)
            if len(entries) > MAX_SEGMENTS:
                segs = [s for s in (read_segment(Path(e.path)) for e in entries) if s is not None]
                merged = compact(self.folder, segs)
                written = merged or written
            evict(self.root, self.limit, keep={written} if written is not None else set())
        except OSError:  # another run tidying at once: the next write tries again
            pass

    def __repr__(self) -> str:
        n = sum(s.cells.size for s in self.segments)
        return f"GridStore({self.key[:12]}..., {len(self.segments)} segments, {n} cells)"
