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

from envlink.core.util import did_you_mean
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
from envlink.grids.units import convert_units, step_days, unit_conversion

__all__ = ["DecodeOptions", "ReadRecipe", "normalise_dataset", "choose_variable", "decode_time_alone"]

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
        "variable='NAME'."
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


@dataclass
class _Layout:
    """Where the grid's space and time are: the layout, the spatial dims and the axes found."""

    kind: str  # "regular", "curvilinear" or "projected"
    ydim: str
    xdim: str
    axes: dict[str, dict[str, str]]
    crs_wkt: str | None = None
    lat_name: str = ""
    lon_name: str = ""
    tdim: str | None = None


def _find_layout(ds: xr.Dataset, variable: str, opts: DecodeOptions, label: str,
                 crs_wkt: str | None) -> _Layout:
    """Step 1: the spatial axes (1-D lat/lon, 2-D curvilinear, or projected y/x) and the time dim."""
    raw = ds[variable]
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
        ydim, xdim = (str(d) for d in raw.dims[-2:])
        found = "projected grid (last two dimensions)"
        layout = _Layout("projected", ydim, xdim, {"y": {"name": ydim, "found_by": found},
                                                     "x": {"name": xdim, "found_by": found}}, crs_wkt)
    else:
        assert latm is not None and lonm is not None  # checked above
        lat_v, lon_v = ds[latm.name], ds[lonm.name]
        axes = {"lat": {"name": latm.name, "found_by": latm.found_by},
                "lon": {"name": lonm.name, "found_by": lonm.found_by}}
        if lat_v.ndim == 1 and lon_v.ndim == 1:
            kind, (ydim, xdim) = "regular", (str(lat_v.dims[0]), str(lon_v.dims[0]))
        elif lat_v.ndim == 2 and lon_v.dims == lat_v.dims:
            kind, (ydim, xdim) = "curvilinear", (str(d) for d in lat_v.dims)
        else:
            raise GridError(
                f"The latitude {latm.name!r} {lat_v.dims} and longitude {lonm.name!r} {lon_v.dims} of "
                f"{label} are neither both 1-D nor 2-D on the same dimensions."
            )
        layout = _Layout(kind, ydim, xdim, axes, None, latm.name, lonm.name)
    for d in (layout.ydim, layout.xdim):
        if d not in raw.dims:
            raise InputError(f"The variable {variable!r} does not vary along the spatial dimension {d!r}.")
    if opts.time is not False:
        tm = find_axis(ds, variable, "time", opts.time or None)
        if tm is None:
            raise missing_axis_error(ds, variable, "time")
        layout.tdim = str(ds[tm.name].dims[0]) if ds[tm.name].ndim == 1 else None
        if layout.tdim is None or layout.tdim not in raw.dims:
            raise InputError(
                f"The time axis {tm.name!r} is not a dimension of {variable!r}; open it as a static "
                "grid with time=False, or name the time axis with time='NAME'."
            )
        layout.axes["time"] = {"name": tm.name, "found_by": tm.found_by}
    return layout


def _other_dims(ds: xr.Dataset, raw: xr.DataArray, variable: str, opts: DecodeOptions,
                layout: _Layout, notes: list[str], picks: dict[str, int]) -> xr.DataArray:
    """Step 2: pick the levels ``select`` names, drop length-1 dims, order (time, y, x).

    ``picks`` receives the position taken along each dimension dropped."""
    for dim, value in (opts.select or {}).items():
        if dim not in raw.dims:
            raise InputError(f"select names the dimension {dim!r}, which {variable!r} does not have "
                             f"(dims {tuple(map(str, raw.dims))}).")
        if dim in ds.indexes and np.asarray(ds[dim].values).dtype.kind in "iuf":
            # the index xarray's .sel(method="nearest") would pick, kept as a position
            picks[dim] = int(ds.indexes[dim].get_indexer([value], method="nearest")[0])
        else:
            picks[dim] = int(value)
        raw = raw.isel({dim: picks[dim]})
        notes.append(f"selected {dim}={np.asarray(raw[dim].values).item() if dim in raw.coords else value}")
    for extra_dim in list(raw.dims):
        d = str(extra_dim)
        if d not in (layout.tdim, layout.ydim, layout.xdim):
            if raw.sizes[d] == 1:
                raw = raw.isel({d: 0}, drop=True)
                picks[d] = 0
                notes.append(f"length-1 dimension {d!r} dropped")
            else:
                raise InputError(
                    f"The variable {variable!r} has the extra dimension {str(d)!r} of length "
                    f"{raw.sizes[d]}; pick one level with select={{{str(d)!r}: value}}."
                )
    order = ([layout.tdim] if layout.tdim else []) + [layout.ydim, layout.xdim]
    return raw.transpose(*order)


def _space_coords(values: xr.DataArray, ds: xr.Dataset, layout: _Layout,
                  notes: list[str]) -> tuple[xr.DataArray, bool]:
    """Step 3: spatial coordinates in envlink's conventions; whether the grid circles the globe."""
    if layout.kind == "regular":
        values = values.assign_coords(lat=_coord_values(ds[layout.lat_name]), lon=_coord_values(ds[layout.lon_name]))
        values, lnotes = normalise_lonlat(values)
        notes.extend(lnotes)
        return values, (covers_circle(values["lon"].values) if values.sizes["lon"] > 1 else False)
    if layout.kind == "curvilinear":
        lat2 = _coord_values(ds[layout.lat_name])
        check_latitudes(np.asarray(lat2, dtype=np.float64))
        lon_in = _coord_values(ds[layout.lon_name])
        lon2 = wrap_longitude(lon_in)
        values = values.assign_coords(lat=(("y", "x"), lat2), lon=(("y", "x"), lon2))
        notes.append("curvilinear grid: 2-D lat/lon kept")
        if not np.array_equal(lon2, lon_in, equal_nan=True):
            notes.append(f"lon {np.nanmin(lon_in):g}..{np.nanmax(lon_in):g} wrapped into -180..180")
        return values, covers_circle(lon2[np.isfinite(lon2)])
    for dim, src in (("y", layout.ydim), ("x", layout.xdim)):
        c = _coord_values(ds[src]) if src in ds.variables else np.arange(values.sizes[dim], dtype=float)
        values = values.assign_coords({dim: c})
        if c.size > 1 and np.all(np.diff(c) < 0):
            values = values.isel({dim: slice(None, None, -1)})
            notes.append(f"{dim} flipped to ascending")
    notes.append("projected grid: coordinates kept in the grid's CRS")
    return values, False


def _time_coords(values: xr.DataArray, ds: xr.Dataset, layout: _Layout, opts: DecodeOptions,
                 label: str, notes: list[str]) -> tuple[xr.DataArray, str]:
    """Step 4: decoded, sorted time stamps and their cells; returns the calendar too."""
    name = layout.axes["time"]["name"]
    if ds[name].size == 0:
        raise GridError(
            f"The time axis {name!r} of {label} has no steps (length 0), so the grid holds no "
            "data. Check the file: it may have been written before any step was added."
        )
    stamps, starts, ends, cal = _decode_time_axis(ds, name, opts, notes)
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
        starts, ends, rule = infer_cells(stamps, variable=name)
        notes.append(rule)
    values = values.assign_coords(
        time=to_output_times(stamps, cal),
        time_start=("time", to_output_times(starts, cal)),
        time_end=("time", to_output_times(ends, cal)),
    )
    return values, cal


def decode_time_alone(ds: xr.Dataset, name: str, opts: DecodeOptions, label: str) -> tuple[xr.DataArray, str, list[str]]:
    """Decode one time axis on its own, as :func:`normalise_dataset` decodes a grid's.

    Returns the positions of the stored steps in time order as a DataArray along
    ``time`` with the ``time`` / ``time_start`` / ``time_end`` coordinates, the
    calendar and the notes (used to put many files' steps on one axis).
    """
    notes: list[str] = []
    index = xr.DataArray(np.arange(ds.sizes[ds[name].dims[0]]), dims="time")
    layout = _Layout("regular", "", "", {"time": {"name": name, "found_by": "given"}}, tdim=str(ds[name].dims[0]))
    values, cal = _time_coords(index, ds, layout, opts, label, notes)
    return values, cal, notes


def _canonical_units(values: xr.DataArray, variable: str, raw_attrs: Mapping[str, Any], opts: DecodeOptions,
                     timed: bool, label: str, notes: list[str]) -> tuple[xr.DataArray, str, Any, bool]:
    """Step 5: values in canonical units (amounts per step become rates); the units and conversion."""
    conv, per_step = unit_conversion(variable, raw_attrs, opts.units, timed, label, notes)
    days = step_days(values["time_start"].values, values["time_end"].values) if per_step else None
    return convert_units(values, conv, per_step, days), conv.target, conv, per_step


@dataclass
class ReadRecipe:
    """How a normalised grid's values come from the stored ones, for reading them cell by cell.

    ``dims``: the variable's stored dims; ``tdim``, ``ydim``, ``xdim``: the stored
    names of time and the two spatial dims; ``picks``: the position taken along
    every other stored dim; ``iy`` / ``ix``: the stored row / column of each
    normalised one (latitudes flipped, longitudes rolled); ``conv`` / ``per_step``:
    the unit conversion; ``dtype``: the normalised values' dtype; ``notes_space`` /
    ``notes_time`` / ``notes_units``: the conventions applied, by step.
    """

    variable: str
    raw_attrs: dict[str, Any]
    dims: tuple[str, ...]
    tdim: str | None
    ydim: str
    xdim: str
    picks: dict[str, int]
    iy: np.ndarray
    ix: np.ndarray
    conv: Any
    per_step: bool
    dtype: np.dtype
    layout: Any
    notes_space: list[str]
    notes_time: list[str]
    notes_units: list[str]


def normalise_dataset(
    ds: xr.Dataset, variable: str | None, opts: DecodeOptions, *, label: str, crs_wkt: str | None = None,
    recipe: list[ReadRecipe] | None = None,
) -> xr.DataArray:
    """Normalise one variable of a raw Dataset (see the module docstring for the steps).

    With ``recipe`` (a list), a :class:`ReadRecipe` of this grid is appended to it.
    """
    variable = choose_variable(ds, variable, label)
    raw_attrs = dict(ds[variable].attrs)
    notes: list[str] = []
    layout = _find_layout(ds, variable, opts, label, crs_wkt)
    picks: dict[str, int] = {}
    raw = _other_dims(ds, ds[variable], variable, opts, layout, notes, picks)
    out_names = {"regular": ("lat", "lon")}.get(layout.kind, ("y", "x"))
    rename = {layout.ydim: out_names[0], layout.xdim: out_names[1],
              **({layout.tdim: "time"} if layout.tdim else {})}
    storage = _storage(raw, rename)
    values, vnotes = decode_values(raw, raw_attrs, name=variable)
    notes.extend(vnotes)
    values = values.drop_vars(list(values.coords)).rename(rename)
    if recipe is not None:  # stored positions, carried through the flips and rolls
        values = values.assign_coords(_envlink_iy=(out_names[0], np.arange(values.sizes[out_names[0]])),
                                      _envlink_ix=(out_names[1], np.arange(values.sizes[out_names[1]])))
    values, is_global = _space_coords(values, ds, layout, notes)
    n_space = len(notes)
    attrs: dict[str, Any] = {k: raw_attrs[k] for k in _KEEP_ATTRS if k in raw_attrs}
    if layout.tdim is not None:
        values, attrs["calendar"] = _time_coords(values, ds, layout, opts, label, notes)
    n_time = len(notes)
    values, units, conv, per_step = _canonical_units(values, variable, raw_attrs, opts, layout.tdim is not None,
                                                     label, notes)
    if recipe is not None:
        recipe.append(ReadRecipe(
            variable, raw_attrs, tuple(str(d) for d in ds[variable].dims), layout.tdim, layout.ydim, layout.xdim,
            picks, np.asarray(values["_envlink_iy"].values), np.asarray(values["_envlink_ix"].values), conv,
            per_step, np.dtype(values.dtype), layout, notes[:n_space], notes[n_space:n_time], notes[n_time:]))
        values = values.drop_vars(["_envlink_iy", "_envlink_ix"])
    attrs.update(
        units=units,
        envlink_variable=variable,
        envlink_global=bool(is_global),
        envlink_conventions=json.dumps(notes),
        envlink_axes=json.dumps(layout.axes),
        envlink_layout=layout.kind,
        envlink_storage=json.dumps(storage),
        _raw_attrs=raw_attrs,
    )
    if layout.crs_wkt is not None:
        attrs["crs_wkt"] = layout.crs_wkt
    values.attrs = attrs
    values.name = variable
    return values
