"""On-disk cache of extraction results, keyed by grid identity and the request.

A result (value, flags, cell, distance and coverage of every row) is stored as one
``.npz`` file named by a SHA-256 key over: the grid's identity
(``attrs["envlink_identity"]``), its shape and coordinates, a hash of its values when
the grid is held in memory, every option of the request, the rows' site and period
columns, the envlink version and a SHA-256 over the source of the extraction code
itself (``envlink/extract/*.py`` and ``envlink/geo.py``), so results cached by older
code are not served after it changes. Files are written atomically, so a crash leaves no
partial entry. Grids without an identity are hashed by value when in memory; lazy
grids without an identity are not cached.

The cache never fails a run: a cache folder that cannot be written gives a
:class:`CacheWarning` and the results are returned uncached; an entry that cannot
be read (damaged, truncated, of another layout) gives a :class:`CacheWarning` and
is computed again, as if absent.
"""

from __future__ import annotations

import hashlib
import json
import os
import warnings
import zipfile
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from envlink._util import atomic_path
from envlink.errors import EnvlinkWarning

__all__ = ["CacheWarning", "request_key", "load", "save", "default_cache_dir", "code_hash"]


class CacheWarning(EnvlinkWarning):
    """The result cache could not be read or written; the run goes on without it."""

_FIELDS = ("value", "cell_lat", "cell_lon", "distance_km", "coverage", "flags")


def default_cache_dir() -> Path:
    """``$ENVLINK_CACHE`` or ``~/.cache/envlink`` (used by the command line)."""
    env = os.environ.get("ENVLINK_CACHE")
    return Path(env) if env else Path.home() / ".cache" / "envlink"


_CODE_HASH: str | None = None


def code_hash() -> str:
    """SHA-256 hex over the source bytes of ``envlink/extract/*.py`` and ``envlink/geo.py``
    (file names included, in sorted order); computed once per process.

    Examples
    --------
    >>> len(code_hash()), code_hash() == code_hash()
    (64, True)
    """
    global _CODE_HASH
    if _CODE_HASH is None:
        here = Path(__file__).resolve().parent
        files = sorted(here.glob("*.py")) + [here.parent / "geo.py"]
        h = hashlib.sha256()
        for f in files:
            h.update(f"{f.parent.name}/{f.name}\x00".encode())
            try:
                h.update(f.read_bytes())
            except OSError:
                h.update(b"<unreadable>")
            h.update(b"\x00")
        _CODE_HASH = h.hexdigest()
    return _CODE_HASH


def _grid_fingerprint(grid: xr.DataArray) -> str | None:
    h = hashlib.sha256()
    ident = grid.attrs.get("envlink_identity")
    in_memory = grid.chunks is None and bool(getattr(grid.variable, "_in_memory", False))
    if not ident and not in_memory:
        return None
    h.update(str(ident).encode())
    h.update(repr((grid.dims, grid.shape, str(grid.dtype), grid.attrs.get("units"))).encode())
    for c in ("time", "time_start", "time_end", "lat", "lon", "x", "y"):
        if c in grid.coords:
            h.update(np.ascontiguousarray(np.asarray(grid[c].values).astype(str)).tobytes())
    if in_memory:
        h.update(np.ascontiguousarray(grid.values).tobytes())
    return h.hexdigest()


def request_key(grid: xr.DataArray, table: pd.DataFrame, options: Mapping[str, object]) -> str | None:
    """SHA-256 hex key of a request, or None when the grid cannot be identified."""
    fp = _grid_fingerprint(grid)
    if fp is None:
        return None
    from envlink import __version__

    h = hashlib.sha256(fp.encode())
    h.update(json.dumps(options, sort_keys=True, default=str).encode())
    h.update(__version__.encode())
    h.update(code_hash().encode())
    for col in ("site_lat", "site_lon", "period_start", "period_end", "locate_status", "site_wkt"):
        if col in table.columns:
            h.update(col.encode())
            h.update("\x1f".join(table[col].astype("string").fillna("<NA>").tolist()).encode())
    return h.hexdigest()


def _reason(exc: BaseException) -> str:
    return (exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)) or type(exc).__name__


def load(cache_dir: str | os.PathLike[str], key: str, n_rows: int) -> dict[str, np.ndarray] | None:
    """The cached arrays of ``key``, or None when absent.

    An entry that cannot be read, lacks a field or is of another length is a miss
    too, with a :class:`CacheWarning` naming the file.

    Examples
    --------
    >>> import tempfile
    >>> load(tempfile.mkdtemp(), "0" * 64, 3) is None
    True
    """
    path = Path(cache_dir) / f"{key}.npz"
    try:
        if not path.is_file():
            return None
        with np.load(path, allow_pickle=False) as z:
            out = {k: z[k] for k in _FIELDS}
        bad = [k for k, v in out.items() if v.shape != (n_rows,)]
        why = f"its {bad[0]!r} holds {out[bad[0]].shape} values for {n_rows} rows" if bad else ""
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile) as exc:
        why = _reason(exc)
    if why:
        warnings.warn(
            f"The cache entry {str(path)!r} could not be read ({why}); it is treated as absent "
            "and the results are computed again.",
            CacheWarning,
            stacklevel=2,
        )
        return None
    return out


def save(cache_dir: str | os.PathLike[str], key: str, arrays: dict[str, np.ndarray]) -> Path | None:
    """Store ``arrays`` (the fields value, cell_lat, cell_lon, distance_km, coverage,
    flags) atomically under ``key``; return the file, or None with a
    :class:`CacheWarning` when the cache cannot be written.

    Examples
    --------
    >>> import tempfile
    >>> a = {k: np.zeros(2) for k in _FIELDS}
    >>> save(tempfile.mkdtemp(), "0" * 64, a).name.endswith(".npz")
    True
    """
    folder = Path(cache_dir)
    path = folder / f"{key}.npz"
    try:
        with atomic_path(path) as tmp, open(tmp, "wb") as fh:
            np.savez(fh, **{k: np.asarray(arrays[k]) for k in _FIELDS})  # type: ignore[arg-type]
    except OSError as exc:
        warnings.warn(
            f"The cache at {str(folder)!r} could not be written ({_reason(exc)}); results were not "
            "cached. Point $ENVLINK_CACHE (or cache_dir=) at a writable folder, or pass --no-cache.",
            CacheWarning,
            stacklevel=2,
        )
        return None
    return path
