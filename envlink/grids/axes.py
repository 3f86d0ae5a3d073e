"""Find the latitude, longitude and time axes of a data variable, and say how each was found.

Search order for each axis (CF Conventions v1.11 §4.1-§4.4): an explicit name given
by the user; then, among the variable's coordinates (its dimensions' coordinate
variables first, then those named by its ``coordinates`` attribute), the first whose
``standard_name`` matches, then ``axis``, then ``units``, then a common name.
"""

from __future__ import annotations

import re
from collections.abc import Hashable
from dataclasses import dataclass

import xarray as xr

from envlink.core.util import did_you_mean
from envlink.errors import InputError

__all__ = ["AxisMatch", "find_axis", "candidate_coords", "LOOKED_FOR"]

_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
_SINCE = re.compile(r"^\s*\w+\s+since\s+", re.IGNORECASE)

_RULES: dict[str, dict[str, object]] = {
    "lat": {
        "standard_name": {"latitude"},
        "axis": "Y",
        "units": _LAT_UNITS,
        "names": ("lat", "latitude", "nav_lat", "lats", "xlat", "lat_rho", "lat_t", "latitude_t"),
    },
    "lon": {
        "standard_name": {"longitude"},
        "axis": "X",
        "units": _LON_UNITS,
        "names": ("lon", "longitude", "nav_lon", "lons", "long", "xlong", "lon_rho", "lon_t"),
    },
    "time": {
        "standard_name": {"time"},
        "axis": "T",
        "units": None,
        "names": ("time", "t", "times", "date", "valid_time", "time_counter"),
    },
}

#: Plain-words description of what is looked for, used in error messages.
LOOKED_FOR = {
    "lat": "standard_name='latitude', axis='Y' (with degrees_north units), units 'degrees_north', "
    "or a name such as lat/latitude/nav_lat",
    "lon": "standard_name='longitude', axis='X' (with degrees_east units), units 'degrees_east', "
    "or a name such as lon/longitude/nav_lon",
    "time": "standard_name='time', axis='T', units '<unit> since <date>', or a name such as "
    "time/t/date",
}


@dataclass(frozen=True)
class AxisMatch:
    """An axis found: the coordinate's name in the file and how it was recognised."""

    axis: str
    name: str
    found_by: str


def candidate_coords(ds: xr.Dataset, variable: str) -> list[Hashable]:
    """Names of the variables that may be coordinates of ``variable``, most likely first."""
    var = ds[variable]
    names: list[Hashable] = [d for d in var.dims if d in ds.variables]
    for text in str(var.attrs.get("coordinates", "")).split():
        if text in ds.variables and text not in names:
            names.append(text)
    for c in var.coords:
        if c not in names and c != variable:
            names.append(c)
    for c in ds.coords:
        if c not in names and c != variable and set(ds[c].dims) <= set(var.dims):
            names.append(c)
    return names


def _matches(axis: str, v: xr.Variable | xr.DataArray) -> str | None:
    rule = _RULES[axis]
    attrs = v.attrs
    sn = str(attrs.get("standard_name", "")).strip().lower()
    if sn in rule["standard_name"]:  # type: ignore[operator]
        return f"standard_name={sn!r}"
    units = str(attrs.get("units", "")).strip().lower()
    ax = str(attrs.get("axis", "")).strip().upper()
    if ax == rule["axis"]:
        if axis == "time" or units in rule["units"]:  # type: ignore[operator]
            return f"axis={ax!r}"
    if axis == "time":
        if _SINCE.match(units):
            return f"units {attrs.get('units')!r}"
    elif units in rule["units"]:  # type: ignore[operator]
        return f"units {attrs.get('units')!r}"
    return None


def find_axis(
    ds: xr.Dataset, variable: str, axis: str, explicit: str | None = None
) -> AxisMatch | None:
    """Find one axis (``"lat"``, ``"lon"`` or ``"time"``) of ``variable`` in ``ds``.

    Parameters
    ----------
    ds : xarray.Dataset
        Opened without CF decoding.
    variable : str
        The data variable.
    axis : {"lat", "lon", "time"}
        Which axis to find.
    explicit : str, optional
        A name given by the user; it must exist.

    Returns
    -------
    AxisMatch or None
        None when nothing matches.

    Examples
    --------
    >>> ds = xr.Dataset({"sst": (("y", "x"), [[1.0]])},
    ...                 coords={"y": ("y", [0.5], {"units": "degrees_north"}), "x": [3.0]})
    >>> find_axis(ds, "sst", "lat")
    AxisMatch(axis='lat', name='y', found_by="units 'degrees_north'")
    """
    if explicit is not None:
        if explicit not in ds.variables:
            choices = [str(n) for n in ds.variables]
            raise InputError(
                f"The {axis} axis {explicit!r} given with {axis}= is not in the grid."
                f"{did_you_mean(explicit, choices)} Variables: {', '.join(choices)}."
            )
        return AxisMatch(axis, explicit, f"option {axis}={explicit!r}")
    cands = candidate_coords(ds, variable)
    for how in ("standard_name", "axis", "units"):
        for c in cands:
            found = _matches(axis, ds[c])
            if found and found.startswith(how):
                return AxisMatch(axis, str(c), found)
    names: tuple[str, ...] = _RULES[axis]["names"]  # type: ignore[assignment]  # dict of mixed rules
    for c in cands:
        if str(c).lower() in names:
            return AxisMatch(axis, str(c), f"name {str(c)!r}")
    return None


def missing_axis_error(ds: xr.Dataset, variable: str, axis: str) -> InputError:
    """The error for an axis that could not be found, saying how to name it."""
    cands = [str(c) for c in candidate_coords(ds, variable)]
    extra = (
        " Or open a static grid (no time axis) with time=False."
        if axis == "time"
        else ""
    )
    return InputError(
        f"No {axis} axis found for {variable!r} (dims {tuple(map(str, ds[variable].dims))}; "
        f"coordinates looked at: {', '.join(cands) or 'none'}). Looked for {LOOKED_FOR[axis]}. "
        f"Name the axis explicitly with {axis}='NAME'.{extra}"
    )
