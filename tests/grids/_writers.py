"""Write small grid files with netCDF4 straight from raw arrays, for the grids tests.

Files are written with the netCDF4 library (not xarray), so the stored bytes are
exactly the raw arrays and attributes given, and the tests decode them by hand.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import netCDF4
import numpy as np


def write_nc(
    path: Path,
    data: np.ndarray,
    *,
    name: str = "sst",
    dims: Sequence[str] = ("time", "lat", "lon"),
    coords: Mapping[str, np.ndarray] | None = None,
    coord_attrs: Mapping[str, Mapping[str, Any]] | None = None,
    attrs: Mapping[str, Any] | None = None,
    extra: Mapping[str, tuple[Sequence[str], np.ndarray, Mapping[str, Any]]] | None = None,
    fill_value: Any = None,
    chunks: Sequence[int] | None = None,
    fmt: str = "NETCDF4",
) -> Path:
    """Write one data variable with its coordinate variables and optional extras.

    ``coords`` maps dimension names to 1-D arrays (written as coordinate variables);
    ``extra`` maps names to ``(dims, values, attrs)`` for anything else (bounds,
    2-D lat/lon). ``fill_value`` becomes ``_FillValue`` (set at creation, as netCDF
    requires).
    """
    coords = dict(coords or {})
    coord_attrs = dict(coord_attrs or {})
    with netCDF4.Dataset(path, "w", format=fmt) as nc:
        nc.set_auto_maskandscale(False)
        sizes = dict(zip(dims, data.shape, strict=True))
        for d, v, _ in (extra or {}).values():
            for dn, n in zip(d, np.shape(v), strict=True):
                sizes.setdefault(dn, n)
        for dn, n in sizes.items():
            nc.createDimension(dn, n)
        for cn, cv in coords.items():
            cv = np.asarray(cv)
            var = nc.createVariable(cn, cv.dtype, (cn,))
            var.set_auto_maskandscale(False)
            var[:] = cv
            for k, v in coord_attrs.get(cn, {}).items():
                var.setncattr(k, v)
        for en, (d, v, a) in (extra or {}).items():
            v = np.asarray(v)
            var = nc.createVariable(en, v.dtype, tuple(d))
            var.set_auto_maskandscale(False)
            var[:] = v
            for k, val in a.items():
                var.setncattr(k, val)
        kwargs: dict[str, Any] = {}
        if fill_value is not None:
            kwargs["fill_value"] = fill_value
        if chunks is not None and fmt == "NETCDF4":
            kwargs["chunksizes"] = tuple(chunks)
        var = nc.createVariable(name, data.dtype, tuple(dims), **kwargs)
        var.set_auto_maskandscale(False)
        var[:] = data
        for k, v in (attrs or {}).items():
            var.setncattr(k, v)
    return path


def lat_lon_attrs() -> dict[str, dict[str, str]]:
    """CF attributes for plain 1-D latitude/longitude coordinate variables."""
    return {
        "lat": {"units": "degrees_north", "standard_name": "latitude"},
        "lon": {"units": "degrees_east", "standard_name": "longitude"},
    }


def simple_grid(
    path: Path,
    data: np.ndarray,
    *,
    lat: np.ndarray,
    lon: np.ndarray,
    time: np.ndarray,
    time_units: str = "days since 2000-01-01",
    calendar: str | None = "standard",
    attrs: Mapping[str, Any] | None = None,
    fill_value: Any = None,
    extra: Mapping[str, tuple[Sequence[str], np.ndarray, Mapping[str, Any]]] | None = None,
    time_attrs: Mapping[str, Any] | None = None,
    name: str = "sst",
    chunks: Sequence[int] | None = None,
    fmt: str = "NETCDF4",
) -> Path:
    """A (time, lat, lon) grid with CF coordinate attributes."""
    ca = lat_lon_attrs()
    ta: dict[str, Any] = {"units": time_units, "standard_name": "time"}
    if calendar is not None:
        ta["calendar"] = calendar
    ta.update(time_attrs or {})
    ca["time"] = ta
    return write_nc(
        path,
        data,
        name=name,
        coords={"time": np.asarray(time), "lat": np.asarray(lat), "lon": np.asarray(lon)},
        coord_attrs=ca,
        attrs={"units": "degC", **(attrs or {})},
        fill_value=fill_value,
        extra=extra,
        chunks=chunks,
        fmt=fmt,
    )
