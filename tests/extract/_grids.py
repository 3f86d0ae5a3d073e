"""Extra grid and table builders for the extract tests (normalised form, see envlink.testing)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import xarray as xr

from envlink.testing import make_grid


def table(lat, lon, start, end, **extra) -> pd.DataFrame:
    """A located table (the columns the locate stage adds)."""
    n = len(lat)
    data = {
        "site_lat": np.asarray(lat, dtype=float),
        "site_lon": np.asarray(lon, dtype=float),
        "period_start": list(start) if not isinstance(start, str) else [start] * n,
        "period_end": list(end) if not isinstance(end, str) else [end] * n,
        "locate_status": ["ok"] * n,
    }
    data.update(extra)
    return pd.DataFrame(data)


def curvilinear(values: np.ndarray, lat2: np.ndarray, lon2: np.ndarray, start: str = "2000-01-01") -> xr.DataArray:
    """A curvilinear grid with dims (time, y, x) and 2-D lat/lon coordinates."""
    base = make_grid(values, lat=np.arange(values.shape[1]), lon=np.arange(values.shape[2]), start=start)
    da = xr.DataArray(
        values,
        dims=("time", "y", "x"),
        coords={
            "time": base.time.values,
            "time_start": ("time", base.time_start.values),
            "time_end": ("time", base.time_end.values),
            "lat": (("y", "x"), lat2),
            "lon": (("y", "x"), lon2),
        },
        attrs={**base.attrs, "envlink_identity": json.dumps({"source": "curvilinear test"})},
    )
    return da


def projected(values: np.ndarray, x: np.ndarray, y: np.ndarray, crs_wkt: str) -> xr.DataArray:
    """A projected grid with 1-D x/y and attrs['crs_wkt']."""
    base = make_grid(values, lat=np.arange(values.shape[1]), lon=np.arange(values.shape[2]))
    return xr.DataArray(
        values,
        dims=("time", "y", "x"),
        coords={
            "time": base.time.values,
            "time_start": ("time", base.time_start.values),
            "time_end": ("time", base.time_end.values),
            "y": y,
            "x": x,
        },
        attrs={**base.attrs, "crs_wkt": crs_wkt, "envlink_identity": json.dumps({"source": "projected test"})},
    )


def daily_point_grid(series, start: str = "2010-01-01", calendar: str = "standard") -> xr.DataArray:
    """A 1×1-cell daily grid holding one series (at 0.5°N, 0.5°E)."""
    v = np.asarray(series, dtype=np.float64)[:, None, None]
    return make_grid(v, lat=[0.5], lon=[0.5], start=start, freq="D", calendar=calendar)
