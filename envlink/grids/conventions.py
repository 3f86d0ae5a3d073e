"""CF data conventions: missing data, valid ranges and packing, and longitude/latitude order.

Missing data follow CF Conventions v1.11 §2.5.1 (``_FillValue``, ``missing_value``,
``valid_min`` / ``valid_max`` / ``valid_range``), packing follows §8.1
(``scale_factor`` / ``add_offset``). Validity is tested on the *packed* values, before
unpacking, as both sections require; a valid range whose type is the unpacked
(floating) type of integer-packed data is read as stated in unpacked units, with a
:class:`ValidRangeWarning`. Every step keeps Dask arrays lazy.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from envlink.errors import GridError, GridWarning, ValidRangeWarning, user_stacklevel

__all__ = [
    "GridWarning",
    "ValidRangeWarning",
    "decode_values",
    "normalise_lonlat",
    "check_latitudes",
    "wrap_longitude",
    "covers_circle",
]


def _num(value: Any) -> str:
    arr = np.atleast_1d(np.asarray(value))
    text = ", ".join(f"{v:g}" if np.issubdtype(arr.dtype, np.number) else str(v) for v in arr)
    return f"[{text}]" if arr.size > 1 else text


def _valid_bounds(attrs: Mapping[str, Any]) -> tuple[Any, Any, np.dtype | None, str]:
    if "valid_range" in attrs:
        vr = np.asarray(attrs["valid_range"])
        if vr.size != 2:
            raise GridError(f"valid_range must hold two numbers; got {attrs['valid_range']!r}.")
        return vr[0], vr[1], vr.dtype, f"valid_range {_num(vr)}"
    lo = attrs.get("valid_min")
    hi = attrs.get("valid_max")
    if lo is None and hi is None:
        return None, None, None, ""
    parts = []
    dtype = None
    if lo is not None:
        parts.append(f"valid_min {_num(lo)}")
        dtype = np.asarray(lo).dtype
    if hi is not None:
        parts.append(f"valid_max {_num(hi)}")
        dtype = np.asarray(hi).dtype if dtype is None else np.result_type(dtype, np.asarray(hi).dtype)
    return lo, hi, dtype, " ".join(parts)


def decode_values(
    raw: xr.DataArray, attrs: Mapping[str, Any], *, name: str = "the variable"
) -> tuple[xr.DataArray, list[str]]:
    """Mask and unpack raw stored values following CF §2.5.1 and §8.1.

    Parameters
    ----------
    raw : xarray.DataArray
        Values as stored (opened with ``mask_and_scale=False``), lazy or not.
    attrs : mapping
        The variable's attributes as stored.
    name : str
        Variable name for messages.

    Returns
    -------
    (xarray.DataArray, list of str)
        Float values with NaN where there are no data (float64 when unpacked or
        stored as integers; float32 stays float32 when nothing is unpacked), and
        the notes of the conventions applied.

    Examples
    --------
    >>> raw = xr.DataArray(np.array([-32768, 0, 100], dtype="int16"))
    >>> out, notes = decode_values(raw, {"_FillValue": np.int16(-32768),
    ...                                  "scale_factor": 0.01, "add_offset": 20.0})
    >>> out.values.tolist(), notes[0]
    ([nan, 20.0, 21.0], '_FillValue -32768 masked')
    """
    notes: list[str] = []
    attrs = dict(attrs)
    if str(attrs.get("_Unsigned", "")).strip().lower() == "true" and raw.dtype.kind == "i":
        # netCDF-3 has no unsigned types; "_Unsigned" says the bytes are unsigned integers.
        uns = np.dtype(f"u{raw.dtype.itemsize}")
        raw = raw.astype(uns)
        for key in ("_FillValue", "missing_value", "valid_min", "valid_max", "valid_range"):
            if key in attrs and np.asarray(attrs[key]).dtype.kind == "i":
                attrs[key] = np.asarray(attrs[key]).astype(raw.dtype.str.replace("u", "i")).astype(uns)
        notes.append(f"_Unsigned: stored signed integers read as {uns.name}")
    stored = raw.dtype
    mask = None

    def _or(m: xr.DataArray) -> None:
        nonlocal mask
        mask = m if mask is None else (mask | m)

    fill = attrs.get("_FillValue")
    if fill is not None and not (np.issubdtype(np.asarray(fill).dtype, np.floating) and np.isnan(fill)):
        _or(raw == np.asarray(fill).astype(stored) if stored.kind in "iuf" else raw == fill)
        notes.append(f"_FillValue {_num(fill)} masked")
    missing = attrs.get("missing_value")
    if missing is not None:
        for mv in np.atleast_1d(np.asarray(missing)):
            if not (np.issubdtype(np.asarray(mv).dtype, np.floating) and np.isnan(mv)):
                _or(raw == mv)
        notes.append(f"missing_value {_num(missing)} masked")

    scale = attrs.get("scale_factor")
    offset = attrs.get("add_offset")
    packed = scale is not None or offset is not None
    lo, hi, range_dtype, range_text = _valid_bounds(attrs)
    range_unpacked = bool(
        range_text
        and packed
        and stored.kind in "iu"
        and range_dtype is not None
        and np.dtype(range_dtype).kind == "f"
    )
    if range_text and not range_unpacked:
        if lo is not None:
            _or(raw < lo)
        if hi is not None:
            _or(raw > hi)
        notes.append(f"{range_text} applied on {'packed' if packed else 'stored'} values")

    if packed:
        s = float(np.asarray(scale if scale is not None else 1.0, dtype=np.float64))
        o = float(np.asarray(offset if offset is not None else 0.0, dtype=np.float64))
        values = raw.astype(np.float64) * s + o
        notes.append(f"unpacked scale_factor={s:g} add_offset={o:g} in float64")
    elif stored.kind in "iub":
        values = raw.astype(np.float64)
    else:
        values = raw
    if range_unpacked:
        if lo is not None:
            _or(values < float(lo))
        if hi is not None:
            _or(values > float(hi))
        notes.append(f"{range_text} applied on unpacked values (stated in unpacked units)")
        warnings.warn(
            f"{name}: {range_text} is stored as {np.dtype(range_dtype).name} while the data "
            f"are packed as {stored.name}; CF (§8.1) asks for the packed type, so the range "
            "looks stated in unpacked units and was applied to the unpacked values.",
            ValidRangeWarning,
            stacklevel=user_stacklevel(),
        )
    if mask is not None:
        values = values.where(~mask)
    return values, notes


def wrap_longitude(lon: np.ndarray) -> np.ndarray:
    """Wrap longitudes (degrees) into [-180, 180).

    Examples
    --------
    >>> wrap_longitude(np.array([0.0, 180.0, 359.5, -180.0])).tolist()
    [0.0, -180.0, -0.5, -180.0]
    """
    out = (np.asarray(lon, dtype=np.float64) + 180.0) % 360.0 - 180.0
    return np.where(out >= 180.0, out - 360.0, out)


def covers_circle(lon: np.ndarray) -> bool:
    """True when longitudes (any shape) go all the way round the circle.

    The sorted distinct longitudes, wrapped into [-180, 180), must leave no circular
    gap (including the one across the antimeridian) wider than 1.5 times their median
    spacing; for a regular 1-D grid this is ``n * step >= 360``.

    Examples
    --------
    >>> covers_circle(np.arange(-179.5, 180.0, 1.0)), covers_circle(np.arange(0.0, 90.0))
    (True, False)
    """
    u = np.unique(wrap_longitude(np.asarray(lon).ravel()))
    if u.size < 2:
        return False
    gaps = np.diff(np.concatenate([u, [u[0] + 360.0]]))
    med = float(np.median(gaps))
    return bool(gaps.max() <= 1.5 * med + 1e-9)


def check_latitudes(lat: np.ndarray) -> None:
    """Raise :class:`GridError` when latitudes leave [-90, 90] (a y axis in metres, or swapped axes).

    Examples
    --------
    >>> check_latitudes(np.array([-90.0, 0.0, 90.0]))
    >>> check_latitudes(np.array([95.0, 100.0]))
    Traceback (most recent call last):
    ...
    envlink.errors.GridError: The latitude coordinate runs 95..100, beyond -90..90 degrees...
    """
    finite = lat[np.isfinite(lat)]
    if finite.size and (finite.min() < -90.0 - 1e-9 or finite.max() > 90.0 + 1e-9):
        raise GridError(
            f"The latitude coordinate runs {finite.min():g}..{finite.max():g}, beyond -90..90 "
            "degrees: it may be a projected y axis in metres, or latitude and longitude may be "
            "swapped. Name the right axis with lat='NAME'."
        )


def normalise_lonlat(
    da: xr.DataArray, *, lat: str = "lat", lon: str = "lon"
) -> tuple[xr.DataArray, list[str]]:
    """Put 1-D longitudes in [-180, 180) ascending and latitudes ascending, lazily.

    Reordering uses ``isel`` (a reversed slice for a descending latitude, an index
    for the longitude roll), so Dask arrays stay lazy and no values are read.

    Examples
    --------
    >>> da = xr.DataArray(np.arange(6.0).reshape(2, 3), dims=("lat", "lon"),
    ...                   coords={"lat": [10.0, -10.0], "lon": [0.0, 120.0, 240.0]})
    >>> out, notes = normalise_lonlat(da)
    >>> out.lon.values.tolist(), out.lat.values.tolist(), notes
    ([-120.0, 0.0, 120.0], [-10.0, 10.0], ['lon 0..240 shifted to -180..180', 'lat flipped to ascending'])
    """
    notes: list[str] = []
    lon_raw = np.asarray(da[lon].values, dtype=np.float64)
    lat_raw = np.asarray(da[lat].values, dtype=np.float64)
    if not (np.all(np.isfinite(lon_raw)) and np.all(np.isfinite(lat_raw))):
        raise GridError("The latitude or longitude coordinate holds missing values.")
    check_latitudes(lat_raw)
    wrapped = wrap_longitude(lon_raw)
    shifted = not np.array_equal(wrapped, lon_raw)
    order = np.argsort(wrapped, kind="stable")
    keep = np.ones(order.size, dtype=bool)
    keep[1:] = np.diff(wrapped[order]) > 1e-9
    if not keep.all():
        dropped = lon_raw[order[~keep]]
        notes.append(f"duplicate longitude column(s) at {_num(dropped)} dropped")
        order = order[keep]
    if shifted:
        notes.append(f"lon {lon_raw.min():g}..{lon_raw.max():g} shifted to -180..180")
    elif not np.array_equal(order, np.arange(lon_raw.size)):
        notes.append("lon sorted ascending")
    if not np.array_equal(order, np.arange(lon_raw.size)):
        da = da.isel({lon: order})
    da = da.assign_coords({lon: wrapped[order]})
    if lat_raw.size > 1 and np.all(np.diff(lat_raw) < 0):
        da = da.isel({lat: slice(None, None, -1)})
        notes.append("lat flipped to ascending")
    elif lat_raw.size > 1 and not np.all(np.diff(lat_raw) > 0):
        lat_order = np.argsort(lat_raw, kind="stable")
        if np.any(np.diff(lat_raw[lat_order]) == 0):
            raise GridError("The latitude coordinate holds duplicate values.")
        da = da.isel({lat: lat_order})
        notes.append("lat sorted ascending")
    da = da.assign_coords({lat: np.asarray(da[lat].values, dtype=np.float64)})
    return da, notes
