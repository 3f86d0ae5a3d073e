"""Grid identity for provenance and caching: files, sizes, times, content hashes, variable.

The content hash is SHA-256. By default it reads the header (first 64 KiB), the
tail (last 64 KiB) and 16 blocks of 64 KiB spread evenly through each file, so
it costs a few milliseconds whatever the file size while still changing when
values are rewritten in place; ``full_hash=True`` hashes every byte. A Zarr store
(a directory) is hashed over its sorted list of files with their sizes, the full
text of its metadata files and a sample of its chunk files (all of them when
``full_hash=True``).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from envlink.errors import GridError

__all__ = ["grid_identity", "archive_identity", "identity_json", "json_safe"]

_BLOCK = 64 * 1024
_SAMPLES = 16
_ZARR_META = {"zarr.json", ".zarray", ".zattrs", ".zgroup", ".zmetadata"}


def json_safe(value: Any) -> Any:
    """Turn numpy scalars/arrays, bytes and tuples into plain JSON values.

    Examples
    --------
    >>> json_safe({"a": np.float32(0.5), "b": np.array([1, 2], dtype="int16")})
    {'a': 0.5, 'b': [1, 2]}
    """
    if isinstance(value, Mapping):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, np.ndarray):
        return [json_safe(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, float) and not np.isfinite(value):
        return str(value)
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def identity_json(identity: Mapping[str, Any]) -> str:
    """Stable JSON text of an identity (sorted keys, no spaces)."""
    return json.dumps(json_safe(identity), sort_keys=True, separators=(",", ":"))


def _hash_file(path: Path, size: int, full: bool) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        if full or size <= _BLOCK * (_SAMPLES + 2):
            for block in iter(lambda: f.read(1 << 20), b""):
                h.update(block)
            return h.hexdigest()
        offsets = [0, *np.linspace(_BLOCK, size - 2 * _BLOCK, _SAMPLES).astype(int), size - _BLOCK]
        for off in offsets:
            f.seek(int(off))
            h.update(f.read(_BLOCK))
    return h.hexdigest()


def _mtime(st: os.stat_result) -> str:
    return _dt.datetime.fromtimestamp(st.st_mtime, tz=_dt.UTC).isoformat(timespec="microseconds")


def _file_entry(path: Path, full: bool) -> dict[str, Any]:
    try:
        st = path.stat()
    except OSError as exc:
        raise GridError(f"Cannot read the grid file {str(path)!r}: {exc.strerror or exc}") from None
    if path.is_dir():
        return _store_entry(path, full)
    return {
        "path": str(path),
        "size": st.st_size,
        "mtime": _mtime(st),
        "sha256": _hash_file(path, st.st_size, full),
    }


def _store_entry(path: Path, full: bool) -> dict[str, Any]:
    files = sorted(p for p in path.rglob("*") if p.is_file())
    h = hashlib.sha256()
    chunks = []
    total = 0
    latest = 0.0
    for p in files:
        st = p.stat()
        rel = p.relative_to(path).as_posix()
        total += st.st_size
        latest = max(latest, st.st_mtime)
        h.update(f"{rel}\0{st.st_size}\n".encode())
        if p.name in _ZARR_META:
            h.update(p.read_bytes())
        else:
            chunks.append((p, st.st_size))
    if chunks:
        picks = range(len(chunks)) if full else sorted(
            set(np.linspace(0, len(chunks) - 1, min(_SAMPLES, len(chunks))).astype(int).tolist())
        )
        for i in picks:
            p, size = chunks[i]
            h.update(_hash_file(p, size, full).encode())
    return {
        "path": str(path),
        "size": total,
        "mtime": _dt.datetime.fromtimestamp(latest, tz=_dt.UTC).isoformat(timespec="microseconds"),
        "sha256": h.hexdigest(),
        "files_in_store": len(files),
    }


def _read_attrs(path: Path, variable: str) -> dict[str, Any]:
    if path.suffix.lower() in (".tif", ".tiff"):
        import rasterio

        with rasterio.open(path) as src:
            return dict(src.tags())
    import xarray as xr

    try:
        with xr.open_dataset(path, decode_cf=False, mask_and_scale=False) as ds:
            if variable not in ds.variables:
                return {}
            return dict(ds[variable].attrs)
    except Exception as exc:  # noqa: BLE001 - any backend failure means an unreadable file
        raise GridError(f"Cannot read the grid file {str(path)!r}: {exc}") from None


def grid_identity(
    paths: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    variable: str,
    *,
    full_hash: bool = False,
    attrs: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Identify a grid for provenance and caching.

    Parameters
    ----------
    paths : path or sequence of paths
        The file(s) or Zarr store(s) the grid is read from.
    variable : str
        The data variable's name in the file.
    full_hash : bool
        Hash every byte instead of a sample (slower on large files).
    attrs : mapping, optional
        The variable's attributes as stored; read from the first file when omitted.

    Returns
    -------
    dict
        ``files`` (a list of ``path``, ``size`` in bytes, ``mtime`` in ISO 8601 UTC,
        ``sha256``), ``variable``, ``attrs``, ``hash`` (``"sampled"`` or ``"full"``)
        and ``key``: the SHA-256 of the stable JSON of everything else, handy as a
        cache key. :func:`identity_json` gives the stable JSON text.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "g.bin"
    >>> _ = p.write_bytes(b"abc")
    >>> ident = grid_identity(p, "sst", attrs={"units": "K"})
    >>> ident["files"][0]["sha256"][:12], ident["files"][0]["size"], ident["hash"]
    ('ba7816bf8f01', 3, 'sampled')
    """
    if isinstance(paths, (str, os.PathLike)):
        paths = [paths]
    resolved = [Path(p).expanduser().resolve() for p in paths]
    if not resolved:
        raise GridError("grid_identity needs at least one path.")
    entries = [_file_entry(p, full_hash) for p in resolved]
    if attrs is None:
        attrs = _read_attrs(resolved[0], variable)
    ident: dict[str, Any] = {
        "files": entries,
        "variable": variable,
        "attrs": json_safe(dict(attrs)),
        "hash": "full" if full_hash else "sampled",
    }
    ident["key"] = hashlib.sha256(identity_json(ident).encode()).hexdigest()
    return ident


def archive_identity(
    paths: Sequence[str | os.PathLike[str]],
    variable: str,
    attrs: Mapping[str, Any],
    *,
    stats: Sequence[tuple[int, int]],
    full_hash: bool = False,
) -> dict[str, Any]:
    """Identity of a many-file archive: every file's path, size and modification time.

    Reading a sample of every file of a daily archive would cost more than opening
    it, so the content is hashed only with ``full_hash=True``; a file rewritten
    under the same name changes its size or modification time, hence the key.

    Parameters
    ----------
    paths : sequence of path
        The files, in time order.
    variable : str
        The data variable's name.
    attrs : mapping
        The variable's attributes as stored.
    stats : sequence of (int, int)
        Each file's size in bytes and modification time in nanoseconds.
    full_hash : bool
        Also hash every byte of every file.

    Examples
    --------
    >>> ident = archive_identity(["/d/a.nc", "/d/b.nc"], "sst", {}, stats=[(10, 0), (10, 10**9)])
    >>> [f["mtime"][:19] for f in ident["files"]], ident["hash"]
    (['1970-01-01T00:00:00', '1970-01-01T00:00:01'], 'stat')
    """
    entries = []
    for p, (size, mtime_ns) in zip(paths, stats, strict=True):
        when = _dt.datetime.fromtimestamp(mtime_ns // 1000 / 1e6, tz=_dt.UTC)
        entry: dict[str, Any] = {"path": os.path.realpath(p), "size": int(size), "mtime_ns": int(mtime_ns),
                                 "mtime": when.isoformat(timespec="microseconds")}
        if full_hash:
            entry["sha256"] = _hash_file(Path(p), int(size), True)
        entries.append(entry)
    ident: dict[str, Any] = {"files": entries, "variable": variable, "attrs": json_safe(dict(attrs)),
                             "hash": "full" if full_hash else "stat"}
    ident["key"] = hashlib.sha256(identity_json(ident).encode()).hexdigest()
    return ident


def memory_identity(values_sample: np.ndarray, variable: str, attrs: Mapping[str, Any]) -> dict[str, Any]:
    """Identity of an in-memory grid: a hash of a sample of its values and coordinates."""
    h = hashlib.sha256(np.ascontiguousarray(values_sample).tobytes())
    ident: dict[str, Any] = {
        "files": [],
        "source": "in-memory",
        "sha256": h.hexdigest(),
        "variable": variable,
        "attrs": json_safe(dict(attrs)),
        "hash": "sampled",
    }
    ident["key"] = hashlib.sha256(identity_json(ident).encode()).hexdigest()
    return ident
