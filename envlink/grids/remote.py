"""Grids that live elsewhere: Zarr stores and netCDF files over HTTP(S) and object storage.

A source written as a URL (``https://``, ``s3://``, ``gs://``, ``az://`` ...) is opened
without downloading it, and the cell reads fetch only the storage chunks the needed
cells touch (:mod:`envlink.extract.reader` reads remote grids one storage chunk at a
time, in this process):

- a Zarr store (a URL ending in ``.zarr``, or one holding ``.zmetadata``, ``.zgroup``
  or ``zarr.json``) through fsspec, for any protocol fsspec knows (``s3://`` needs
  s3fs, ``gs://`` gcsfs ...). Over HTTP(S) fsspec's own HTTP file system is used
  when aiohttp is installed (the ``remote`` extra), else its requests-based one;
- a netCDF file over HTTP(S) through the netCDF library's byte-range reads (only the
  HDF5 metadata and the chunks read are fetched); on another protocol, through an
  fsspec file read by h5netcdf (which must then be installed).

The identity of a remote grid is its URL with the size and ETag / Last-Modified the
server gives (for Zarr, the SHA-256 of its metadata documents), so a store or file
replaced under the same URL changes it.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import re
import warnings
from typing import Any

import xarray as xr

from envlink.errors import GridError, InputError
from envlink.grids.identity import identity_json, json_safe

__all__ = ["is_url", "open_remote_raw", "remote_entry", "remote_identity"]

_ZARR_META = (".zmetadata", "zarr.json", ".zgroup", ".zarray")


def is_url(text: object) -> bool:
    """True for a URL with a scheme other than ``file`` (``https://``, ``s3://`` ...).

    Examples
    --------
    >>> is_url("https://example.org/sst.zarr"), is_url("s3://bucket/sst.nc"), is_url("/data/sst.nc")
    (True, True, False)
    """
    if not isinstance(text, str):
        return False
    m = re.match(r"([A-Za-z][A-Za-z0-9+.-]*)://", text)
    return m is not None and m.group(1).lower() != "file"


def remote_identity(entry: dict[str, Any], variable: str, attrs: dict[str, Any]) -> dict[str, Any]:
    """The identity of a remote grid (see :func:`envlink.grids.identity.grid_identity` for the fields)."""
    ident: dict[str, Any] = {"files": [entry], "variable": variable, "attrs": json_safe(dict(attrs)),
                             "hash": "remote"}
    ident["key"] = hashlib.sha256(identity_json(ident).encode()).hexdigest()
    return ident


def _http(url: str) -> bool:
    return url.lower().startswith(("http://", "https://"))


def _filesystem(url: str) -> Any:
    """An fsspec file system for ``url``: for HTTP(S), the asyncio one when aiohttp is installed."""
    import fsspec

    if _http(url) and importlib.util.find_spec("aiohttp") is None:
        from fsspec.implementations.http_sync import HTTPFileSystem

        return HTTPFileSystem()
    try:
        return fsspec.filesystem(url.split("://", 1)[0])
    except (ImportError, ValueError) as exc:
        raise InputError(f"Cannot read {url!r}: {exc}. Install the package fsspec names for this protocol "
                         "(pip install 'envlink[remote]' gives HTTP(S)).") from None


def _zarr_documents(fs: Any, url: str) -> dict[str, bytes]:
    found: dict[str, bytes] = {}
    for name in _ZARR_META:
        try:
            found[name] = fs.cat_file(f"{url.rstrip('/')}/{name}")
        except (FileNotFoundError, OSError, ValueError):
            continue
    return found


def _zarr_store(fs: Any, url: str) -> Any:
    """The store xarray opens: the URL itself when fsspec's async HTTP is there, else a wrapped store."""
    if not (_http(url) and importlib.util.find_spec("aiohttp") is None):
        return url
    import zarr
    from fsspec.implementations.asyn_wrapper import AsyncFileSystemWrapper

    return zarr.storage.FsspecStore(AsyncFileSystemWrapper(fs, asynchronous=True), path=url.rstrip("/"),
                                    read_only=True)


def _reason(exc: BaseException) -> str:
    text = str(exc).strip()
    return f"{type(exc).__name__}: {text.splitlines()[0]}" if text else type(exc).__name__


def open_remote_raw(url: str, engine: str | None = None) -> tuple[xr.Dataset, dict[str, Any], bool]:
    """Open a remote grid without decoding; its identity entry, and whether it is a Zarr store."""
    if importlib.util.find_spec("fsspec") is None:
        raise InputError(f"Reading {url!r} needs fsspec: pip install 'envlink[remote]'.")
    fs = _filesystem(url)
    docs = _zarr_documents(fs, url) if url.rstrip("/").lower().endswith(".zarr") or engine == "zarr" else {}
    if not docs and engine is None and not url.lower().endswith((".nc", ".nc4", ".h5", ".cdf")):
        docs = _zarr_documents(fs, url)
    kw: dict[str, Any] = {"decode_cf": False, "mask_and_scale": False, "decode_times": False, "chunks": None}
    try:
        if docs:
            consolidated = ".zmetadata" in docs or b"consolidated_metadata" in docs.get("zarr.json", b"")
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                ds = xr.open_dataset(_zarr_store(fs, url), engine="zarr", consolidated=consolidated, **kw)
        elif _http(url):
            ds = xr.open_dataset(url + "#mode=bytes", engine=engine or "netcdf4", **kw)
        else:
            if importlib.util.find_spec("h5netcdf") is None:
                raise InputError(f"Reading the netCDF file {url!r} over {url.split('://')[0]}:// needs h5netcdf "
                                 "(pip install h5netcdf); netCDF over HTTP(S) and Zarr stores need only fsspec.")
            ds = xr.open_dataset(fs.open(url, "rb"), engine="h5netcdf", **kw)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001 - any failure of the remote read is an unreadable grid
        raise GridError(f"Cannot open the remote grid {url!r}: {_reason(exc)}. Check the URL and that the server "
                        "allows byte-range requests.") from None
    return ds, remote_entry(fs, url, docs), bool(docs)


def remote_entry(fs: Any, url: str, docs: dict[str, bytes] | None = None) -> dict[str, Any]:
    """The identity entry of a remote file or store: URL, size, and what the server says changes with it."""
    entry: dict[str, Any] = {"path": url, "remote": True}
    if docs:
        h = hashlib.sha256()
        for name in sorted(docs):
            h.update(name.encode() + b"\0" + docs[name])
        entry["sha256_metadata"] = h.hexdigest()
        return entry
    try:
        info = fs.info(url)
    except (OSError, ValueError, FileNotFoundError) as exc:
        raise GridError(f"Cannot reach the remote grid {url!r}: {_reason(exc)}.") from None
    entry["size"] = info.get("size")
    for key in ("ETag", "etag", "Last-Modified", "LastModified", "last_modified", "mtime"):
        if info.get(key) is not None:
            entry[key.lower().replace("-", "_")] = str(info[key])
    return json.loads(json.dumps(entry, default=str))
