"""Open any climate raster (netCDF, Zarr, GeoTIFF, many files, an open xarray object) and normalise it.

The result is envlink's *normalised grid* (see :mod:`envlink.testing`): dims
``("time", "lat", "lon")`` with latitudes ascending and longitudes ascending in
[-180, 180), or ``("time", "y", "x")`` with 2-D ``lat``/``lon`` (curvilinear) or 1-D
projected ``y``/``x`` and ``attrs["crs_wkt"]``; decoded time with ``time_start`` /
``time_end`` cells; values masked, unpacked and in canonical units; and the
conventions applied listed in ``attrs["envlink_conventions"]``.
"""

from __future__ import annotations

import glob as _glob
import importlib.util
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from envlink.errors import GridError, InputError
from envlink.grids.decode import DecodeOptions, normalise_dataset
from envlink.grids.filecheck import check_classic_size, file_format, first_bytes, has_grid_signature
from envlink.grids.geotiff import read_geotiff
from envlink.grids.identity import grid_identity, identity_json, memory_identity

__all__ = ["open_grid", "resolve_paths", "open_raw"]

Source = str | os.PathLike[str] | Sequence[str | os.PathLike[str]] | xr.Dataset | xr.DataArray
_GLOB_CHARS = set("*?[")


def _is_zarr(path: Path) -> bool:
    if path.suffix.lower() == ".zarr":
        return True
    return path.is_dir() and any((path / m).exists() for m in ("zarr.json", ".zgroup", ".zarray", ".zmetadata"))


def _is_tiff(path: Path) -> bool:
    if path.suffix.lower() in (".tif", ".tiff"):
        return True
    return path.suffix.lower() not in (".nc", ".nc4", ".cdf", ".h5", ".zarr") and file_format(path) == "tiff"


#: xarray engine per file format: the netCDF-C library reads classic and HDF5 files.
_ENGINES = {"netcdf4": "netcdf4", "netcdf3": "netcdf4"}


def resolve_paths(source: str | os.PathLike[str] | Sequence[str | os.PathLike[str]]) -> list[Path]:
    """Expand a path, a glob pattern or a list of either into sorted existing paths.

    Examples
    --------
    >>> resolve_paths([])
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: No grid files given.
    """
    items = [source] if isinstance(source, (str, os.PathLike)) else list(source)
    out: list[Path] = []
    for item in items:
        text = os.fspath(item)
        if _GLOB_CHARS & set(text) and not Path(text).exists():
            matches = sorted(_glob.glob(os.path.expanduser(text)))
            if not matches:
                raise InputError(f"The pattern {text!r} matches no files.")
            out.extend(Path(m) for m in matches)
        else:
            p = Path(text).expanduser()
            if not p.exists():
                raise GridError(f"The grid file {text!r} does not exist.")
            out.append(p)
    if not out:
        raise InputError("No grid files given.")
    return out


def _zarr_consolidated(path: Path) -> bool:
    if (path / ".zmetadata").exists():
        return True
    meta = path / "zarr.json"
    if meta.exists():
        try:
            return bool(json.loads(meta.read_text()).get("consolidated_metadata"))
        except (OSError, ValueError):
            return False
    return False


def _chunks(chunks: Any) -> Any:
    if isinstance(chunks, str) and chunks == "auto":
        return "auto" if importlib.util.find_spec("dask") is not None else None
    return chunks


#: Target bytes of a default dask chunk: whole series over spatial blocks.
_CHUNK_BYTES_CONTIGUOUS = 32 * 2**20
_CHUNK_BYTES_MAX = 128 * 2**20


def _is_time_dim(ds: xr.Dataset, dim: str) -> bool:
    if dim.lower() in ("time", "t", "date", "valid_time"):
        return True
    if dim not in ds.variables:
        return False
    attrs = ds.variables[dim].attrs
    return " since " in str(attrs.get("units", "")) or attrs.get("axis") == "T" or attrs.get("standard_name") == "time"


def storage_chunks_for(ds: xr.Dataset, name: str) -> dict[str, int]:
    """Default dask chunks of a variable that follow its storage.

    A chunked variable (netCDF-4/HDF5 ``chunksizes``, Zarr ``chunks``) gets its file
    chunks along every dimension except time, which is whole (so a cell's series is
    one task) unless that makes a chunk larger than 128 MiB, when it is the largest
    multiple of the file's time chunk that fits. A contiguous (or classic netCDF)
    variable gets whole series over bands of whole rows of about 32 MiB: each task
    is then one run of contiguous reads. Variables of fewer than two dims: ``{}``.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> ds = xr.Dataset({"v": xr.Variable(("time", "lat", "lon"), np.broadcast_to(np.float32(0), (360, 720, 1440)),
    ...                                   encoding={"chunksizes": (12, 90, 180)})})
    >>> storage_chunks_for(ds, "v")
    {'time': 360, 'lat': 90, 'lon': 180}
    >>> ds["v"].encoding = {"contiguous": True}
    >>> storage_chunks_for(ds, "v")
    {'time': 360, 'lat': 16, 'lon': 1440}
    """
    var = ds.variables[name]
    if var.ndim < 2:
        return {}
    dims = [str(d) for d in var.dims]
    sizes = [int(n) for n in var.shape]
    item = int(var.dtype.itemsize) if var.dtype.kind in "iufcb" else 8
    enc = var.encoding
    file_chunks = enc.get("chunksizes") or enc.get("chunks")
    if not file_chunks and isinstance(enc.get("preferred_chunks"), Mapping):
        pref = enc["preferred_chunks"]
        file_chunks = [pref.get(d, n) for d, n in zip(dims, sizes, strict=True)]
    times = [i for i, d in enumerate(dims) if _is_time_dim(ds, d)]
    ti = times[0] if times else None
    if file_chunks and len(file_chunks) == var.ndim and not enc.get("contiguous"):
        spec = [max(1, min(int(c), n)) for c, n in zip(file_chunks, sizes, strict=True)]
        if ti is not None:
            other = int(np.prod([c for i, c in enumerate(spec) if i != ti])) * item
            fit = max(1, _CHUNK_BYTES_MAX // max(other, 1))
            tc = spec[ti]
            spec[ti] = sizes[ti] if fit >= sizes[ti] else max(tc, (fit // tc) * tc)
        return dict(zip(dims, spec, strict=True))
    # contiguous: whole last dim, whole time, rows of the second-last dim by budget
    spec = [1] * var.ndim
    spec[-1] = sizes[-1]
    if ti is not None:
        spec[ti] = sizes[ti]
    row_dim = var.ndim - 2 if ti != var.ndim - 2 else var.ndim - 3
    if row_dim >= 0:
        per_row = int(np.prod([c for i, c in enumerate(spec) if i != row_dim])) * item
        spec[row_dim] = int(min(sizes[row_dim], max(1, _CHUNK_BYTES_CONTIGUOUS // max(per_row, 1))))
    return dict(zip(dims, spec, strict=True))


def open_raw(path: Path, *, chunks: Any = "auto", engine: str | None = None) -> xr.Dataset:
    """Open a netCDF file or Zarr store without any CF decoding, naming the path on failure."""
    if not _is_zarr(path):
        check_classic_size(path)
    kwargs: dict[str, Any] = {
        "decode_cf": False,
        "mask_and_scale": False,
        "decode_times": False,
        "chunks": _chunks(chunks),
    }
    if _is_zarr(path):
        kwargs["engine"] = "zarr"
        kwargs["consolidated"] = _zarr_consolidated(path)
    elif engine is not None:
        kwargs["engine"] = engine
    elif file_format(path) in _ENGINES:
        # named from the file's signature: xarray's guessing would import every engine
        # installed (GeoTIFF's among them) to ask each whether it reads the file
        kwargs["engine"] = _ENGINES[file_format(path)]
    follow = kwargs["chunks"] == "auto"
    if follow:
        kwargs["chunks"] = None  # lazy; dask chunks that follow the storage are set below
    try:
        ds = xr.open_dataset(path, **kwargs)
    except Exception as exc:  # noqa: BLE001 - every backend failure means an unreadable file
        kind = "Zarr store" if _is_zarr(path) else "grid file"
        if kind == "grid file" and not has_grid_signature(path):
            begins = f"it begins with {first_bytes(path)!r}" if path.stat().st_size else "it is empty (0 bytes)"
            raise GridError(
                f"Cannot open the grid file {str(path)!r}: it is not a netCDF (classic or "
                f"netCDF-4/HDF5) or GeoTIFF file; {begins}. Check the path: grids are "
                "gridded rasters, not tables."
            ) from None
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        raise GridError(
            f"Cannot open the {kind} {str(path)!r}: {type(exc).__name__}: {reason}. "
            "It may be truncated, corrupt or not a netCDF/Zarr/GeoTIFF grid."
        ) from None
    return _follow_storage(ds) if follow else ds


def _follow_storage(ds: xr.Dataset) -> xr.Dataset:
    """Dask chunks that follow each gridded variable's storage (:func:`storage_chunks_for`)."""
    for name in list(ds.data_vars):
        if ds[name].ndim >= 2:
            ds[name] = ds[name].chunk(storage_chunks_for(ds, str(name)))
    return ds


def _open_url(url: str, variable: str | None, opts: DecodeOptions, chunks: Any, engine: str | None) -> xr.DataArray:
    """A Zarr store or netCDF file at a URL (see :mod:`envlink.grids.remote`)."""
    from envlink.grids.remote import open_remote_raw, remote_identity

    ds, entry, _ = open_remote_raw(url, engine)
    follow = _chunks(chunks) == "auto"
    if follow:
        ds = _follow_storage(ds)
    elif chunks is not None:
        ds = ds.chunk(chunks)
    da = normalise_dataset(ds, variable, opts, label=repr(url))
    raw_attrs = da.attrs.pop("_raw_attrs")
    storage = json.loads(da.attrs["envlink_storage"])
    storage["remote"] = True  # read one storage chunk at a time (envlink.extract.reader)
    da.attrs["envlink_storage"] = json.dumps(storage)
    da.attrs["envlink_identity"] = identity_json(remote_identity(entry, da.attrs["envlink_variable"], raw_attrs))
    return da


def _in_memory_identity(ds: xr.Dataset, variable: str) -> dict[str, Any]:
    source = ds.encoding.get("source") or ds[variable].encoding.get("source")
    if source and Path(source).exists():
        return grid_identity(source, variable, attrs=ds[variable].attrs)
    parts = [np.asarray(ds[c].values).astype(str).ravel() for c in ds[variable].coords if ds[c].ndim <= 2]
    sample = np.concatenate(parts) if parts else np.array([], dtype=str)
    return memory_identity(sample, variable, ds[variable].attrs)


def _open_one(path: Path, variable: str | None, opts: DecodeOptions, chunks: Any, engine: str | None,
              band_dates: str | Sequence[Any] | None, full_hash: bool) -> xr.DataArray:
    crs_wkt = None
    if _is_tiff(path):
        ds, tif_var, crs_wkt = read_geotiff(path, band_dates=band_dates, chunks=_chunks(chunks),
                                            static=opts.time is False, calendar=opts.calendar)
        if variable is not None and variable != tif_var:
            raise InputError(
                f"The GeoTIFF {str(path)!r} holds one variable, {tif_var!r}; got variable={variable!r}."
            )
        variable = tif_var
    else:
        ds = open_raw(path, chunks=chunks, engine=engine)
    da = normalise_dataset(ds, variable, opts, label=str(path), crs_wkt=crs_wkt)
    ident = grid_identity(path, da.attrs["envlink_variable"], full_hash=full_hash,
                          attrs=da.attrs.pop("_raw_attrs"))
    da.attrs["envlink_identity"] = identity_json(ident)
    return da


def _combine(parts: list[xr.DataArray], paths: list[Path], full_hash: bool) -> xr.DataArray:
    if parts[0].ndim < 3 or "time" not in parts[0].dims:
        raise InputError("Several files can only be combined along a time axis; these are static grids.")
    first = parts[0]
    for p, da in zip(paths[1:], parts[1:], strict=True):
        for c in ("lat", "lon", "x", "y"):
            if c in first.coords and (c not in da.coords or first[c].shape != da[c].shape
                                      or not np.allclose(first[c].values, da[c].values, rtol=0.0, atol=1e-9)):
                raise InputError(
                    f"The file {str(p)!r} has different {c} coordinates from {str(paths[0])!r}; "
                    "files combined along time must share one spatial grid."
                )
        for key in ("units", "calendar", "envlink_variable"):
            if da.attrs.get(key) != first.attrs.get(key):
                raise InputError(
                    f"The file {str(p)!r} has {key} {da.attrs.get(key)!r} but {str(paths[0])!r} has "
                    f"{first.attrs.get(key)!r}; files combined along time must agree."
                )
    order = sorted(range(len(parts)), key=lambda i: parts[i]["time_start"].values[0])
    parts = [parts[i] for i in order]
    paths = [paths[i] for i in order]
    for i in range(1, len(parts)):
        prev_end = parts[i - 1]["time_end"].values[-1]
        this_start = parts[i]["time_start"].values[0]
        if this_start < prev_end:
            raise InputError(
                f"The files {str(paths[i - 1])!r} and {str(paths[i])!r} overlap in time (the first "
                f"ends at {prev_end}, the second starts at {this_start}); remove the duplicate "
                "steps or pass the files that form one series."
            )
    conventions: list[str] = []
    for da in parts:
        for note in json.loads(da.attrs["envlink_conventions"]):
            if note not in conventions:
                conventions.append(note)
    conventions.append(f"{len(parts)} files combined along time, sorted by time")
    attrs = dict(first.attrs)
    out = xr.concat(parts, dim="time", coords="minimal", compat="override", join="override",
                    combine_attrs="override")
    attrs["envlink_conventions"] = json.dumps(conventions)
    ident = grid_identity(paths, attrs["envlink_variable"], full_hash=full_hash,
                          attrs=json.loads(first.attrs["envlink_identity"])["attrs"])
    attrs["envlink_identity"] = identity_json(ident)
    out.attrs = attrs
    return out


def open_grid(
    source: Source,
    variable: str | None = None,
    *,
    lat: str | None = None,
    lon: str | None = None,
    time: str | Literal[False] | None = None,
    units: str | None = None,
    calendar: str | None = None,
    band_dates: str | Sequence[Any] | None = None,
    chunks: Any = "auto",
    select: Mapping[str, Any] | None = None,
    engine: str | None = None,
    full_hash: bool = False,
) -> xr.DataArray:
    """Open a gridded raster and return it in envlink's normalised form.

    Parameters
    ----------
    source : path, glob pattern, sequence of paths, URL, xarray.Dataset or xarray.DataArray
        A netCDF file, a Zarr store (directory or ``.zarr``), a GeoTIFF (``.tif``), a
        list or glob of files combined along time (netCDF files form an archive read
        file by file, docs/archives.md), the URL of a Zarr store or netCDF file
        (``https://``, ``s3://`` ...; read through fsspec, only the chunks needed),
        or an object already open.
    variable : str, optional
        The data variable; needed when the file holds more than one.
    lat, lon, time : str, optional
        Names of the axes when the file's attributes do not say (see docs/grids.md).
        ``time=False`` opens a static grid (no time axis): dims ``("lat", "lon")``.
    units : str, optional
        The units of the values, overriding (or supplying) the ``units`` attribute.
    calendar : str, optional
        The CF calendar of the time axis, overriding (or supplying) the attribute.
    band_dates : str or sequence, optional
        GeoTIFF only: one ISO date, or one ``(start, end)`` pair, per band; or text
        (``"2001-01-01,2001-02-01"``, intervals ``start/end``, or a repeating interval
        ``"R/2001-01-01/P1M"``), read in ``calendar`` (see
        :func:`envlink.grids.geotiff.band_times`). A GeoTIFF made by GDAL from a netCDF
        file takes the dates it recorded when none are given.
    chunks : "auto", dict, int or None
        Dask chunks (``"auto"`` when Dask is installed); ``None`` opens without Dask.
    select : mapping, optional
        Values of other dimensions to pick (e.g. ``{"depth": 0.5}``, nearest match).
    engine : str, optional
        xarray backend engine for netCDF (default: xarray's choice).
    full_hash : bool
        Hash whole files for the identity instead of a sample.

    Returns
    -------
    xarray.DataArray
        The normalised grid (dims, coords and attrs as in :mod:`envlink.testing`).

    Raises
    ------
    GridError
        A missing, unreadable, truncated or corrupt file (the message names it).
    InputError
        An unknown variable, an axis that cannot be found, unknown units, bad options.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> ds = xr.Dataset(
    ...     {"t2m": (("time", "lat", "lon"), np.full((2, 2, 2), 300.0), {"units": "K"})},
    ...     coords={"time": ("time", [0, 1], {"units": "days since 2000-01-01"}),
    ...             "lat": [10.0, 0.0], "lon": [90.0, 270.0]})
    >>> g = open_grid(ds)
    >>> g.dims, g.lat.values.tolist(), g.lon.values.tolist(), round(float(g[0, 0, 0]), 6)
    (('time', 'lat', 'lon'), [0.0, 10.0], [-90.0, 90.0], 26.85)
    >>> g.attrs["units"], str(g.time_end.values[-1])[:10]
    ('degC', '2000-01-03')
    """
    opts = DecodeOptions(lat=lat, lon=lon, time=time, units=units, calendar=calendar, select=select)
    if time is not None and time is not False and not isinstance(time, str):
        raise InputError(f"The 'time' parameter of open_grid must be a name, None or False; got {time!r}.")
    if isinstance(source, xr.DataArray):
        name = str(source.name) if source.name is not None else "data"
        if variable is not None and variable != name:
            raise InputError(f"The DataArray is named {name!r}; got variable={variable!r}.")
        source = source.to_dataset(name=name)
        variable = name
    if isinstance(source, xr.Dataset):
        da = normalise_dataset(source, variable, opts, label="the dataset")
        da.attrs.pop("_raw_attrs")
        da.attrs["envlink_identity"] = identity_json(
            _in_memory_identity(source, da.attrs["envlink_variable"])
        )
        return da
    if isinstance(source, str) and "://" in source:
        from envlink.grids.remote import is_url

        if is_url(source):
            return _open_url(source, variable, opts, chunks, engine)
    paths = resolve_paths(source)
    if len(paths) == 1:
        return _open_one(paths[0], variable, opts, chunks, engine, band_dates, full_hash)
    if band_dates is not None:
        raise InputError("band_dates applies to one GeoTIFF; several files were given.")
    if time is not False and all(file_format(p) in _ENGINES for p in paths[:1]):
        from envlink.grids.archive import open_archive

        da = open_archive(paths, open_raw(paths[0], chunks=None, engine=engine), variable, opts, full_hash)
        return da.chunk(chunks) if chunks not in (None, "auto") else da
    from envlink.core.progress import progress_bar

    parts = []
    for p in progress_bar(len(paths), "opening grid files", "file", show=None if len(paths) >= 8 else False,
                          iterable=paths):
        parts.append(_open_one(p, variable, opts, chunks, engine, None, full_hash))
        variable = parts[-1].attrs["envlink_variable"]
    return _combine(parts, paths, full_hash)

