"""The cell-series store's files: listing, clearing, size limit (least recently used), compaction.

The store's root holds one folder per grid identity (see :mod:`envlink.extract.store`),
each with a ``grid.json`` describing the grid and immutable segment files
(:mod:`envlink.extract.segments`). These functions work on that layout only; two
runs may call them at once (a file another run removed first is skipped).
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import shutil
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from envlink.extract.segments import SUFFIX, TMP_PREFIX, Segment, read_segment, write_segment

__all__ = ["StoreInfo", "list_stores", "clear_stores", "evict", "compact", "remove_stale", "segment_files",
           "GRID_FILE", "MAX_SEGMENTS"]

GRID_FILE = "grid.json"
#: Segments of one grid beyond which they are merged into one.
MAX_SEGMENTS = 8
#: A temporary file older than this (seconds) belongs to no running writer.
_STALE_TMP_S = 3600.0
#: An empty grid folder younger than this (seconds) may be about to get its first segment.
_YOUNG_FOLDER_S = 600.0


def segment_files(folder: Path) -> list[os.DirEntry[str]]:
    """The segment files of a grid folder, oldest name first (names start with the time written)."""
    try:
        with os.scandir(folder) as it:
            return sorted((e for e in it if e.name.endswith(SUFFIX) and e.is_file()), key=lambda e: e.name)
    except OSError:
        return []


def _grid_folders(root: Path) -> Iterator[Path]:
    try:
        with os.scandir(root) as it:
            folders = [Path(e.path) for e in it if e.is_dir() and (Path(e.path) / GRID_FILE).is_file()]
    except OSError:
        return
    yield from sorted(folders)


def _unlink(path: Path | str) -> int:
    """Remove a file; its size, or 0 when another run removed it first."""
    try:
        size = os.stat(path).st_size
        os.unlink(path)
        return size
    except OSError:
        return 0


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def remove_stale(folder: Path) -> int:
    """Remove temporary files that no running writer owns (a run killed mid-write); their count.

    A temporary file ``.tmp-<pid>-<token>`` is stale when its process is gone (on this
    machine) or when it is older than an hour (a writer elsewhere on a shared disk).
    """
    removed = 0
    now = time.time()
    try:
        entries = [e for e in os.scandir(folder) if e.name.startswith(TMP_PREFIX)]
    except OSError:
        return 0
    for e in entries:
        pid_text = e.name[len(TMP_PREFIX):].split("-", 1)[0]
        try:
            old = now - e.stat().st_mtime > _STALE_TMP_S
        except OSError:
            continue
        dead = pid_text.isdigit() and int(pid_text) != os.getpid() and not _pid_alive(int(pid_text))
        if old or dead:
            removed += _unlink(e.path) > 0
    return removed


@dataclass(frozen=True)
class StoreInfo:
    """One grid's store, for ``envlink cache``: its key, what it holds, its size and last use."""

    key: str
    folder: Path
    label: str
    variable: str
    cells: int
    empty_cells: int
    span: str
    segments: int
    size: int
    last_use: float

    def last_use_text(self) -> str:
        """The last use as ISO 8601 UTC to the second (``-`` when never)."""
        if not self.last_use:
            return "-"
        return _dt.datetime.fromtimestamp(self.last_use, tz=_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _meta(folder: Path) -> dict[str, object]:
    try:
        meta = json.loads((folder / GRID_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return meta if isinstance(meta, dict) else {}


def _label(meta: dict[str, object]) -> str:
    files = meta.get("files")
    if isinstance(files, list) and files and isinstance(files[0], dict):
        more = f" (and {len(files) - 1} more files)" if len(files) > 1 else ""
        return str(files[0].get("path", "?")) + more
    return "?"


def list_stores(root: Path) -> list[StoreInfo]:
    """Every grid's store under ``root`` (largest first)."""
    out = []
    for folder in _grid_folders(root):
        meta = _meta(folder)
        cells: list[np.ndarray] = []
        empty: list[np.ndarray] = []
        size, last = 0, 0.0
        entries = segment_files(folder)
        for e in entries:
            try:
                seg = read_segment(Path(e.path))
                st = e.stat()
            except OSError:
                continue
            size += st.st_size
            last = max(last, st.st_mtime)
            if seg is not None:
                cells.append(seg.cells)
                empty.append(seg.empty)
        n_cells = int(np.unique(np.concatenate(cells)).size) if cells else 0
        n_empty = int(np.setdiff1d(np.concatenate(empty), np.concatenate(cells) if cells else []).size) \
            if empty else 0
        span = meta.get("time_span")
        out.append(StoreInfo(folder.name, folder, _label(meta), str(meta.get("variable", "?")), n_cells, n_empty,
                             " to ".join(span) if isinstance(span, list) else "?", len(entries), size, last))
    return sorted(out, key=lambda s: (-s.size, s.key))


def clear_stores(root: Path, keys: list[str] | None = None) -> tuple[int, int]:
    """Remove every grid's store (``keys`` None) or those whose key starts with one of ``keys``.

    Returns the number of stores removed and the bytes freed.
    """
    removed, freed = 0, 0
    for folder in list(_grid_folders(root)):
        if keys is not None and not any(folder.name.startswith(k) for k in keys):
            continue
        freed += sum(e.stat().st_size for e in os.scandir(folder) if e.is_file())
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    return removed, freed


def evict(root: Path, limit: int, keep: set[Path] | frozenset[Path] = frozenset()) -> int:
    """Remove the least recently used segments until the store is at most ``limit`` bytes.

    Segments are touched (their modification time set) when a run uses them, so the
    oldest modification time is the least recently used. Segments in ``keep`` (the one
    just written) go last. Grid folders left without segments are removed once they
    are older than a few minutes. Returns the bytes freed.
    """
    entries = []
    for folder in _grid_folders(root):
        for e in segment_files(folder):
            try:
                st = e.stat()
            except OSError:
                continue
            entries.append((Path(e.path) in keep, st.st_mtime, e.path, st.st_size))
    total = sum(e[3] for e in entries)
    freed = 0
    for _, _, path, _ in sorted(entries):
        if total - freed <= limit:
            break
        freed += _unlink(path)
    now = time.time()
    for folder in _grid_folders(root):
        try:
            young = now - (folder / GRID_FILE).stat().st_mtime < _YOUNG_FOLDER_S
        except OSError:
            continue
        if not young and not segment_files(folder):
            shutil.rmtree(folder, ignore_errors=True)
    return freed


def compact(folder: Path, segments: list[Segment]) -> Path | None:
    """Merge ``segments`` (of one grid) into one new segment, then remove them.

    Each cell is taken once (from the first segment that holds it); cells known to be
    empty are the union, less those with a series. Returns the new segment, or None
    when there was nothing to merge.
    """
    if len(segments) < 2:
        return None
    nt, dtype = segments[0].nt, segments[0].dtype
    segments = [s for s in segments if s.nt == nt and s.dtype == dtype]
    union = np.unique(np.concatenate([s.cells for s in segments]))
    owner = np.full(union.size, -1, dtype=np.int64)
    where = np.zeros(union.size, dtype=np.int64)
    for k, seg in enumerate(segments):
        pos = np.searchsorted(union, seg.cells)
        free = owner[pos] < 0
        owner[pos[free]] = k
        where[pos[free]] = np.nonzero(free)[0]
    empty = np.setdiff1d(np.unique(np.concatenate([s.empty for s in segments])), union)
    step = max(1, 2**24 // max(nt * dtype.itemsize, 1))

    def blocks() -> Iterator[np.ndarray]:
        for a in range(0, union.size, step):
            b = min(a + step, union.size)
            out = np.empty((b - a, nt), dtype=dtype)
            for k, seg in enumerate(segments):
                mine = np.nonzero(owner[a:b] == k)[0]
                if mine.size:
                    out[mine] = seg.rows(where[a:b][mine])
            yield out

    path = write_segment(folder, union, empty, nt, dtype, blocks)
    for seg in segments:
        _unlink(seg.path)
    return path
