"""On-disk cache of extraction results, keyed by grid identity and the request.

A result (value, flags, cell, distance and coverage of every row) is stored as one
``.npz`` file named by a SHA-256 key over: the grid's identity
(``attrs["envlink_identity"]``), its shape and coordinates, a hash of its values when
the grid is held in memory, every option of the request, the rows' site and period
columns, and the envlink version. Files are written atomically, so a crash leaves no
partial entry. Grids without an identity are hashed by value when in memory; lazy
grids without an identity are not cached.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from envlink._util import atomic_path

__all__ = ["request_key", "load", "save", "default_cache_dir"]

_FIELDS = ("value", "cell_lat", "cell_lon", "distance_km", "coverage", "flags")


def default_cache_dir() -> Path:
    """``$ENVLINK_CACHE`` or ``~/.cache/envlink`` (used by the command line)."""
    env = os.environ.get("ENVLINK_CACHE")
    return Path(env) if env else Path.home() / ".cache" / "envlink"


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
    for col in ("site_lat", "site_lon", "period_start", "period_end", "locate_status", "site_wkt"):
        if col in table.columns:
            h.update(col.encode())
            h.update("\x1f".join(table[col].astype("string").fillna("<NA>").tolist()).encode())
    return h.hexdigest()


def load(cache_dir: str | os.PathLike[str], key: str, n_rows: int) -> dict[str, np.ndarray] | None:
    """The cached arrays of ``key``, or None when absent, unreadable or of another length."""
    path = Path(cache_dir) / f"{key}.npz"
    if not path.exists():
        return None
    try:
        with np.load(path, allow_pickle=False) as z:
            out = {k: z[k] for k in _FIELDS}
    except (OSError, ValueError, KeyError):
        return None
    return out if all(v.shape[0] == n_rows for v in out.values()) else None


def save(cache_dir: str | os.PathLike[str], key: str, arrays: dict[str, np.ndarray]) -> Path:
    """Store ``arrays`` (the fields value, cell_lat, cell_lon, distance_km, coverage,
    flags) atomically under ``key``."""
    path = Path(cache_dir) / f"{key}.npz"
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, **{k: np.asarray(arrays[k]) for k in _FIELDS})  # type: ignore[arg-type]
    return path
