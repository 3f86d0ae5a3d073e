"""Turn one raw (undecoded) xarray Dataset into envlink's normalised grid.

Used by :func:`envlink.grids.open.open_grid` for every source. The steps, in order:
choose the variable; find the axes; pick or drop other dimensions; mask and unpack
(:mod:`envlink.grids.conventions`); decode time and its cells
(:mod:`envlink.grids.timeaxis`); reorder latitudes / longitudes; convert units
(:mod:`envlink.grids.units`). Every step on the values is lazy under Dask.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Literal

import cftime
import numpy as np
import xarray as xr

from envlink._util import did_you_mean
from envlink.errors import GridError, InputError
from envlink.grids.axes import find_axis, missing_axis_error
from envlink.grids.conventions import (
    check_latitudes,
    covers_circle,
    decode_values,
    normalise_lonlat,
    wrap_longitude,
)
from envlink.grids.timeaxis import (
    STANDARD_CALENDARS,
    cells_from_bounds,
    decode_time,
    infer_cells,
    normalise_calendar,
    to_output_times,
)
from envlink.grids.units import canonical_conversion

__all__ = ["DecodeOptions", "normalise_dataset", "choose_variable"]

_KEEP_ATTRS = ("standard_name", "long_name", "cell_methods")


@dataclass(frozen=True)
class DecodeOptions:
    """What the user declared about a grid (see :func:`envlink.open_grid`)."""

    lat: str | None = None
    lon: str | None = None
    time: str | Literal[False] | None = None
    units: str | None = None
    calendar: str | None = None
    select: Mapping[str, Any] | None = None


def choose_variable(ds: xr.Dataset, variable: str | None, label: str) -> str:
    """Return the data variable to read: the one asked for, or the only gridded one."""
    names = [str(v) for v in ds.data_vars]
    if variable is not None:
        if variable not in ds.data_vars:
            raise InputError(
                f"The variable {variable!r} is not in {label}.{did_you_mean(variable, names)} "
                f"Variables: {', '.join(names) or 'none'}."
            )
        return variable
    referenced: set[str] = set()
    for v in ds.variables.values():
        for key in ("bounds", "climatology", "grid_mapping"):
            if key in v.attrs:
                referenced.add(str(v.attrs[key]).split(":")[0].strip())
        referenced.update(str(v.attrs.get("coordinates", "")).split())
    cands = [
        n for n in names
        if ds[n].ndim >= 2 and n not in referenced
        and str(ds[n].attrs.get("standard_name", "")) not in ("latitude", "longitude")
    ]
    if len(cands) == 1:
        return cands[0]
    if not cands:
        raise InputError(f"{label} holds no gridded variable (variables: {', '.join(names) or 'none'}).")
    raise InputError(
        f"{label} holds several gridded variables: {', '.join(cands)}. Choose one with "
        "variable='NAME' (--var NAME on the command line)."
    )


def _grid_mapping_wkt(attrs: Mapping[str, Any]) -> str | None:
    """The CRS of a CF grid-mapping variable (§5.6) as WKT: ``crs_wkt``, or built by pyproj."""
    wkt = attrs.get("crs_wkt") or attrs.get("spatial_ref")
    if wkt:
        return str(wkt)
    if "grid_mapping_name" not in attrs:
        return None
    try:
        from pyproj import CRS

        return CRS.from_cf(dict(attrs)).to_wkt()
    except Exception:  # noqa: BLE001 - an incomplete grid mapping gives no CRS
        return None


def _coord_values(v: xr.DataArray) -> np.ndarray:
    vals = np.asarray(v.values)
    if "scale_factor" in v.attrs or "add_offset" in v.attrs:
        vals = vals * float(v.attrs.get("scale_factor", 1.0)) + float(v.attrs.get("add_offset", 0.0))
    return vals.astype(np.float64)


def _to_cftime(values: np.ndarray, calendar: str) -> np.ndarray:
    vals = np.asarray(values)
    if vals.dtype.kind == "M":
        micro = vals.astype("datetime64[us]").astype(np.int64)
        cal = calendar if calendar in STANDARD_CALENDARS else "proleptic_gregorian"
        return np.asarray(cftime.num2date(micro, "microseconds since 1970-01-01", calendar=cal,
                                          only_use_cftime_datetimes=True), dtype=object)
    return np.asarray(vals, dtype=object)


def _decode_time_axis(ds: xr.Dataset, name: str, opts: DecodeOptions, notes: list[str]) -> tuple[
    np.ndarray, np.ndarray | None, np.ndarray | None, str
]:
    tvar = ds[name]
    if tvar.ndim != 1:
        raise InputError(f"The time axis {name!r} has {tvar.ndim} dimensions; expected 1.")
    vals = np.asarray(tvar.values)
    file_cal = tvar.attrs.get("calendar") or tvar.encoding.get("calendar")
    if vals.dtype == object and vals.size and hasattr(vals[0], "calendar"):
        file_cal = file_cal or vals[0].calendar
    if opts.calendar is not None:
        cal = normalise_calendar(opts.calendar, variable=name)
        if file_cal is None:
            notes.append(f"calendar declared as {cal!r} (no calendar attribute)")
        elif normalise_calendar(file_cal, variable=name) != cal:
            notes.append(f"calendar declared as {cal!r} (file says {file_cal!r})")
    else:
        cal = normalise_calendar(file_cal, variable=name)
        if file_cal is None:
            notes.append("no calendar attribute: CF default 'standard' assumed")
    units = tvar.attrs.get("units") or tvar.encoding.get("units")
    if vals.dtype.kind in "iuf":
        if not units:
            raise InputError(
                f"The time axis {name!r} has no units; CF (§4.4) needs '<unit> since <date>'. "
                "Name another axis with time='NAME', or open a static grid with time=False."
            )
        stamps, tnotes = decode_time(vals, str(units), cal, variable=name)
        notes.extend(tnotes)
    else:
        stamps = _to_cftime(vals, cal)
    bname = tvar.attrs.get("bounds") or tvar.encoding.get("bounds")
    starts: np.ndarray | None = None
    ends: np.ndarray | None = None
    if bname and bname in ds.variables:
        bvar = ds[bname]
        if bvar.dims[0] != tvar.dims[0]:
            bvar = bvar.transpose(tvar.dims[0], ...)
        b = np.asarray(bvar.values)
        if b.dtype.kind in "iuf":
            starts, ends = cells_from_bounds(b, str(bvar.attrs.get("units") or units), cal, variable=bname)
        else:
            starts, ends = _to_cftime(b[:, 0], cal), _to_cftime(b[:, 1], cal)
        notes.append(f"time cells from bounds variable {bname!r}")
    clim = tvar.attrs.get("climatology")
    if clim and starts is None:
        # CF §7.4: climatological bounds span the years averaged over, so they overlap from
        # step to step; the cells are inferred from the stamps instead.
        notes.append(f"climatological time axis ({clim!r} bounds span the years averaged): "
                     "cells inferred from the stamps")
    return stamps, starts, ends, cal


def _storage(raw: xr.DataArray, rename: Mapping[str, str]) -> dict[str, Any]:
    enc = raw.encoding
    chunks = enc.get("chunksizes") or enc.get("chunks")
    info: dict[str, Any] = {"dims": [rename.get(str(d), str(d)) for d in raw.dims]}
    if chunks is not None and len(chunks) == raw.ndim:
        info["chunks"] = {rename.get(str(d), str(d)): int(c) for d, c in zip(raw.dims, chunks, strict=True)}
    elif enc.get("preferred_chunks"):
        info["chunks"] = {rename.get(str(d), str(d)): int(c) for d, c in enc["preferred_chunks"].items()}
    elif enc.get("contiguous"):
        info["chunks"] = "contiguous"
    if "zlib" in enc or "compression" in enc or "compressors" in enc:
        info["compressed"] = bool(enc.get("zlib") or enc.get("compression") or enc.get("compressors"))
    info["shape"] = {rename.get(str(d), str(d)): int(n) for d, n in raw.sizes.items()}
    return info


def normalise_dataset(
    ds: xr.Dataset, variable: str | None, opts: DecodeOptions, *, label: str, crs_wkt: str | None = None
) -> xr.DataArray:
    """Normalise one variable of a raw Dataset (see the module docstring for the steps)."""
    variable = choose_variable(ds, variable, label)
    raw = ds[variable]
    raw_attrs = dict(raw.attrs)
    notes: list[str] = []
    axes: dict[str, dict[str, str]] = {}
    layout = "regular"
    if crs_wkt is None:
        latm = find_axis(ds, variable, "lat", opts.lat)
        lonm = find_axis(ds, variable, "lon", opts.lon)
        gm = str(raw.attrs.get("grid_mapping", "")).split(":")[0].strip()
        gm_wkt = _grid_mapping_wkt(ds[gm].attrs) if gm in ds.variables else None
        if (latm is None or lonm is None) and gm_wkt and opts.lat is None:
            crs_wkt = str(gm_wkt)
        elif latm is None or lonm is None:
            raise missing_axis_error(ds, variable, "lat" if latm is None else "lon")
    if crs_wkt is not None:
        layout = "projected"
        ydim, xdim = (str(d) for d in raw.dims[-2:])
        axes["y"] = {"name": ydim, "found_by": "projected grid (last two dimensions)"}
        axes["x"] = {"name": xdim, "found_by": "projected grid (last two dimensions)"}
    else:
        assert latm is not None and lonm is not None  # checked above
        lat_name, lon_name = latm.name, lonm.name
        lat_v, lon_v = ds[lat_name], ds[lon_name]
        axes["lat"] = {"name": latm.name, "found_by": latm.found_by}
        axes["lon"] = {"name": lonm.name, "found_by": lonm.found_by}
        if lat_v.ndim == 1 and lon_v.ndim == 1:
            ydim, xdim = str(lat_v.dims[0]), str(lon_v.dims[0])
        elif lat_v.ndim == 2 and lon_v.dims == lat_v.dims:
            layout = "curvilinear"
            ydim, xdim = (str(d) for d in lat_v.dims)
        else:
            raise GridError(
                f"The latitude {lat_name!r} {lat_v.dims} and longitude {lon_name!r} {lon_v.dims} of "
                f"{label} are neither both 1-D nor 2-D on the same dimensions."
            )
    for d in (ydim, xdim):
        if d not in raw.dims:
            raise InputError(f"The variable {variable!r} does not vary along the spatial dimension {d!r}.")
    tdim = None
    if opts.time is not False:
        tm = find_axis(ds, variable, "time", opts.time or None)
        if tm is None:
            raise missing_axis_error(ds, variable, "time")
        tdim = str(ds[tm.name].dims[0]) if ds[tm.name].ndim == 1 else None
        if tdim is None or tdim not in raw.dims:
            raise InputError(
                f"The time axis {tm.name!r} is not a dimension of {variable!r}; open it as a static "
                "grid with time=False, or name the time axis with time='NAME'."
            )
        axes["time"] = {"name": tm.name, "found_by": tm.found_by}
    for dim, value in (opts.select or {}).items():
        if dim not in raw.dims:
            raise InputError(f"select names the dimension {dim!r}, which {variable!r} does not have "
                             f"(dims {tuple(map(str, raw.dims))}).")
        if dim in ds.variables and np.asarray(ds[dim].values).dtype.kind in "iuf":
            raw = raw.sel({dim: value}, method="nearest")
        else:
            raw = raw.isel({dim: int(value)})
        notes.append(f"selected {dim}={np.asarray(raw[dim].values).item() if dim in raw.coords else value}")
    for extra_dim in list(raw.dims):
        d = str(extra_dim)
        if d not in (tdim, ydim, xdim):
            if raw.sizes[d] == 1:
                raw = raw.isel({d: 0}, drop=True)
                notes.append(f"length-1 dimension {d!r} dropped")
            else:
                raise InputError(
                    f"The variable {variable!r} has the extra dimension {str(d)!r} of length "
                    f"{raw.sizes[d]}; pick one level with select={{{str(d)!r}: value}}."
                )
    order = ([tdim] if tdim else []) + [ydim, xdim]
    raw = raw.transpose(*order)
    out_names = {"regular": ("lat", "lon")}.get(layout, ("y", "x"))
    rename = {ydim: out_names[0], xdim: out_names[1], **({tdim: "time"} if tdim else {})}
    storage = _storage(raw, rename)
    values, vnotes = decode_values(raw, raw_attrs, name=variable)
    notes.extend(vnotes)
    values = values.drop_vars(list(values.coords)).rename(rename)

    if layout == "regular":
        values = values.assign_coords(lat=_coord_values(ds[lat_name]), lon=_coord_values(ds[lon_name]))
        values, lnotes = normalise_lonlat(values)
        notes.extend(lnotes)
        is_global = covers_circle(values["lon"].values) if values.sizes["lon"] > 1 else False
    elif layout == "curvilinear":
        lat2 = _coord_values(ds[lat_name])
        check_latitudes(np.asarray(lat2, dtype=np.float64))
        lon_in = _coord_values(ds[lon_name])
        lon2 = wrap_longitude(lon_in)
        values = values.assign_coords(lat=(("y", "x"), lat2), lon=(("y", "x"), lon2))
        notes.append("curvilinear grid: 2-D lat/lon kept")
        if not np.array_equal(lon2, lon_in, equal_nan=True):
            notes.append(f"lon {np.nanmin(lon_in):g}..{np.nanmax(lon_in):g} wrapped into -180..180")
        is_global = covers_circle(lon2[np.isfinite(lon2)])
    else:
        for dim, src in (("y", ydim), ("x", xdim)):
            c = _coord_values(ds[src]) if src in ds.variables else np.arange(values.sizes[dim], dtype=float)
            values = values.assign_coords({dim: c})
            if c.size > 1 and np.all(np.diff(c) < 0):
                values = values.isel({dim: slice(None, None, -1)})
                notes.append(f"{dim} flipped to ascending")
        notes.append("projected grid: coordinates kept in the grid's CRS")
        is_global = False

    attrs: dict[str, Any] = {k: raw_attrs[k] for k in _KEEP_ATTRS if k in raw_attrs}
    if tdim is not None:
        stamps, starts, ends, cal = _decode_time_axis(ds, axes["time"]["name"], opts, notes)
        sort = np.argsort(np.asarray([d for d in stamps], dtype=object), kind="stable")
        if not np.array_equal(sort, np.arange(sort.size)):
            values = values.isel(time=sort)
            stamps = stamps[sort]
            if starts is not None and ends is not None:
                starts, ends = starts[sort], ends[sort]
            notes.append("time sorted ascending")
        if any(a == b for a, b in zip(stamps[:-1], stamps[1:], strict=True)):
            raise GridError(f"The time axis of {label} holds duplicate stamps.")
        if starts is None or ends is None:
            starts, ends, rule = infer_cells(stamps, variable=axes["time"]["name"])
            notes.append(rule)
        values = values.assign_coords(
            time=to_output_times(stamps, cal),
            time_start=("time", to_output_times(starts, cal)),
            time_end=("time", to_output_times(ends, cal)),
        )
        attrs["calendar"] = cal

    units_text = opts.units if opts.units is not None else raw_attrs.get("units")
    if opts.units is not None:
        notes.append(
            f"units declared as {opts.units!r}"
            + (f" (file says {raw_attrs['units']!r})" if raw_attrs.get("units") not in (None, opts.units) else "")
        )
    if units_text is None:
        raise InputError(
            f"The variable {variable!r} in {label} has no units attribute. Declare its units with "
            "units='degC' (say; any units pint reads, '1' for a dimensionless quantity), or --units "
            "on the command line."
        )
    hint = " ".join(str(raw_attrs.get(k, "")) for k in ("standard_name", "long_name")) + " " + variable
    conv, per_step = canonical_conversion(str(units_text), variable=repr(variable), standard_name=hint)
    if not conv.is_identity or per_step:
        if values.dtype != np.float64:
            values = values.astype(np.float64)
        if conv.scale != 1.0:
            values = values * conv.scale
        if conv.offset != 0.0:
            values = values + conv.offset
        if per_step:
            if tdim is None:
                raise InputError(
                    f"{variable!r} holds amounts per time step ({units_text}); a static grid has no "
                    "step to turn them into a rate. Declare a rate with units='mm/day' if it is one."
                )
            days = (_to_cftime_days(values["time_start"].values, values["time_end"].values))
            values = values / xr.DataArray(days, dims="time")
        notes.append(conv.note)
    elif conv.source != conv.target:
        notes.append(f"units {conv.source} read as {conv.target}")
    attrs.update(
        units=conv.target,
        envlink_variable=variable,
        envlink_global=bool(is_global),
        envlink_conventions=json.dumps(notes),
        envlink_axes=json.dumps(axes),
        envlink_layout=layout,
        envlink_storage=json.dumps(storage),
        _raw_attrs=raw_attrs,
    )
    if crs_wkt is not None:
        attrs["crs_wkt"] = crs_wkt
    values.attrs = attrs
    values.name = variable
    return values


def _to_cftime_days(starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    s, e = np.asarray(starts), np.asarray(ends)
    if s.dtype.kind == "M":
        return (e - s) / np.timedelta64(1, "D")
    return np.array([(b - a).total_seconds() / 86400.0 for a, b in zip(s, e, strict=True)])
