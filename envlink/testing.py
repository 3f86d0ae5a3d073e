"""Builders of small in-memory grids in envlink's normalised form, for tests and examples.

The normalised form is the contract between :func:`envlink.open_grid` (which produces
it from any file) and :func:`envlink.attach` (which consumes it):

- an ``xarray.DataArray`` with dims ``("time", "lat", "lon")``: 1-D ``lat`` ascending,
  1-D ``lon`` ascending in [-180, 180), both float64, degrees;
  or, for curvilinear grids, dims ``("time", "y", "x")`` with 2-D coords ``lat`` and
  ``lon`` (float64, degrees, lon in [-180, 180));
  or, for projected grids, dims ``("time", "y", "x")`` with 1-D ``y`` and ``x`` in the
  grid's CRS and ``attrs["crs_wkt"]`` holding that CRS;
- ``time``: decoded time stamps, ``datetime64[ns]`` for the standard / gregorian /
  proleptic_gregorian calendars, ``cftime`` objects for every other calendar;
- ``time_start`` and ``time_end`` coordinates along ``time``: each step's cell,
  half-open ``[time_start, time_end)``, of the same type as ``time``;
- values in canonical units (``degC`` for temperatures, ``mm/day`` for precipitation),
  NaN where there are no data;
- ``attrs``: ``units``, ``calendar`` (CF name), ``envlink_variable`` (name in the file),
  ``envlink_global`` (True when longitudes cover the whole circle), ``envlink_identity``
  (JSON text: the grid identity for provenance and caching) and
  ``envlink_conventions`` (JSON list of the conventions applied on reading).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Literal

import numpy as np
import xarray as xr

__all__ = ["make_grid"]


def make_grid(
    values: np.ndarray | None = None,
    *,
    lat: Sequence[float] | np.ndarray | None = None,
    lon: Sequence[float] | np.ndarray | None = None,
    start: str = "2000-01-01",
    periods: int | None = None,
    freq: Literal["D", "MS"] = "MS",
    calendar: str = "standard",
    units: str = "degC",
    name: str = "sst",
    seed: int | None = None,
) -> xr.DataArray:
    """Build a normalised grid (see the module docstring) from arrays.

    Parameters
    ----------
    values : ndarray, optional
        Shape ``(time, lat, lon)``. When omitted, a seeded random field
        ``20 + N(0, 1)`` °C is drawn with ``periods`` steps.
    lat, lon : array-like, optional
        Cell-centre coordinates; default a 1° global grid (-89.5..89.5, -179.5..179.5).
    start : str
        First step's start, ISO date.
    periods : int, optional
        Number of time steps (default ``values.shape[0]`` or 12).
    freq : {"D", "MS"}
        Daily steps stamped at 00:00, or monthly steps stamped at the month start;
        bounds follow the steps.
    calendar : str
        Any CF calendar; non-standard ones give ``cftime`` stamps.
    units, name : str
        Stored in ``attrs["units"]`` and as the array's name.
    seed : int, optional
        Seed for the random field.

    Returns
    -------
    xarray.DataArray

    Examples
    --------
    >>> g = make_grid(lat=[0.5, 1.5], lon=[10.5, 11.5], periods=3, seed=0)
    >>> g.dims, g.sizes["time"], str(g.time_end.values[0])[:10]
    (('time', 'lat', 'lon'), 3, '2000-02-01')
    """
    lat_a = np.asarray(lat if lat is not None else np.arange(-89.5, 90.0, 1.0), dtype=np.float64)
    lon_a = np.asarray(lon if lon is not None else np.arange(-179.5, 180.0, 1.0), dtype=np.float64)
    if values is not None:
        values = np.asarray(values)
        periods = values.shape[0] if periods is None else periods
    periods = 12 if periods is None else periods
    use_cftime = calendar not in ("standard", "gregorian", "proleptic_gregorian")
    edges = xr.date_range(
        start, periods=periods + 1, freq=freq, calendar=calendar, use_cftime=use_cftime
    )
    stamps = edges[:-1]
    if values is None:
        rng = np.random.default_rng(seed)
        values = 20.0 + rng.standard_normal((periods, lat_a.size, lon_a.size))
    if values.shape != (periods, lat_a.size, lon_a.size):
        raise ValueError(
            f"values has shape {values.shape}; expected {(periods, lat_a.size, lon_a.size)}"
        )
    step = float(np.median(np.diff(lon_a))) if lon_a.size > 1 else 360.0
    is_global = bool(lon_a.size * step >= 360.0 - 1e-6)
    return xr.DataArray(
        values,
        dims=("time", "lat", "lon"),
        coords={
            "time": np.asarray(stamps),
            "lat": lat_a,
            "lon": lon_a,
            "time_start": ("time", np.asarray(edges[:-1])),
            "time_end": ("time", np.asarray(edges[1:])),
        },
        name=name,
        attrs={
            "units": units,
            "calendar": calendar,
            "envlink_variable": name,
            "envlink_global": is_global,
            "envlink_identity": json.dumps({"source": "envlink.testing.make_grid", "seed": seed}),
            "envlink_conventions": json.dumps([]),
        },
    )
