"""GeoTIFF rasters: bands mapped to user-given dates, CRS kept, and site projection.

A GeoTIFF carries no CF time axis, so the dates of its bands are declared by the
user (``band_dates=``): one date per band (cells then inferred by the rules of
:func:`envlink.grids.timeaxis.infer_cells`) or one ``(start, end)`` pair per band
(half-open cells given outright). The raster is read through rioxarray without
masking or scaling, so the same CF-style decoding applies (nodata as
``_FillValue``, scale and offset as ``scale_factor`` / ``add_offset``).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from envlink.errors import GridError, InputError

__all__ = ["read_geotiff", "project_sites", "parse_band_dates"]


def parse_band_dates(band_dates: Sequence[Any], n_bands: int) -> tuple[np.ndarray, np.ndarray | None]:
    """Parse band dates (dates, or ``(start, end)`` pairs) into stamps and optional bounds.

    Examples
    --------
    >>> t, b = parse_band_dates(["2001-01-01", "2001-02-01"], 2)
    >>> str(t[1])[:10], b is None
    ('2001-02-01', True)
    >>> t, b = parse_band_dates([("2001-01-01", "2001-01-08")], 1)
    >>> str(b[0, 1])[:10]
    '2001-01-08'
    """
    items = list(band_dates)
    if len(items) != n_bands:
        raise InputError(
            f"band_dates gives {len(items)} date(s) but the GeoTIFF has {n_bands} band(s); "
            "give one date (or one (start, end) pair) per band, in band order."
        )
    pairs = [isinstance(v, (tuple, list)) for v in items]
    try:
        if all(pairs):
            b = np.array(
                [[pd.Timestamp(s).to_datetime64(), pd.Timestamp(e).to_datetime64()] for s, e in items],
                dtype="datetime64[ns]",
            )
            return b[:, 0].copy(), b
        if any(pairs):
            raise InputError("band_dates must be all dates or all (start, end) pairs, not a mix.")
        t = np.array([pd.Timestamp(v).to_datetime64() for v in items], dtype="datetime64[ns]")
    except (ValueError, TypeError) as exc:
        raise InputError(f"band_dates could not be read as ISO 8601 dates: {exc}") from None
    return t, None


def read_geotiff(
    path: Path, *, band_dates: Sequence[Any] | None, chunks: Any, static: bool
) -> tuple[xr.Dataset, str, str | None]:
    """Read a GeoTIFF into a raw (undecoded) Dataset with a ``time`` axis from ``band_dates``.

    Returns the dataset, the data variable's name and the CRS as WKT (None when the
    file has no CRS). Geographic CRSs give ``lat``/``lon`` coordinates in degrees;
    projected ones keep ``y``/``x``.
    """
    try:
        import rasterio
        import rioxarray
    except ImportError as exc:  # pragma: no cover - the geotiff extra is not installed
        raise InputError(
            "Reading GeoTIFF needs the geotiff extra: pip install 'envlink[geotiff]'."
        ) from exc
    try:
        with rasterio.open(path) as src:
            band_units = [u for u in (src.units or ()) if u]
            descriptions = [d for d in (src.descriptions or ()) if d]
            tags = src.tags()
            block_h, block_w = src.block_shapes[0]
            pixel_interleaved = str(getattr(src.interleaving, "name", "")).lower() == "pixel"
        with warnings.catch_warnings():
            # rioxarray's own use of deprecated dask/affine calls, not the user's concern
            warnings.simplefilter("ignore", FutureWarning)
            warnings.simplefilter("ignore", PendingDeprecationWarning)
            da = rioxarray.open_rasterio(path, mask_and_scale=False, chunks=chunks)
    except Exception as exc:  # noqa: BLE001 - any failure of the reader is an unreadable file
        raise GridError(f"Cannot open the GeoTIFF {str(path)!r}: {exc}") from None
    if isinstance(da, list):  # pragma: no cover - subdatasets
        raise GridError(f"The GeoTIFF {str(path)!r} holds several subdatasets; open one of them.")
    crs = da.rio.crs
    wkt = crs.to_wkt() if crs is not None else None
    attrs = {}
    for key in ("_FillValue", "scale_factor", "add_offset", "units"):
        if key not in da.attrs:
            continue
        value = da.attrs[key]
        if isinstance(value, (tuple, list)):
            if len(set(value)) != 1:
                raise InputError(
                    f"The bands of the GeoTIFF {str(path)!r} have different {key} values "
                    f"{tuple(value)}; envlink reads bands of one variable with one {key}."
                )
            value = value[0]
        attrs[key] = value
    if "units" not in attrs and band_units:
        attrs["units"] = band_units[0]
    if "units" not in attrs and "units" in tags:
        attrs["units"] = tags["units"]
    name = str(tags.get("name") or (descriptions[0] if len(set(descriptions)) == 1 and descriptions else "") or path.stem)
    if name in ("x", "y", "lat", "lon", "time", "band", "nv", "spatial_ref", "time_bnds"):
        name = "band_data"  # a file stem that would clash with a coordinate name
    n_bands = int(da.sizes["band"])
    if static:
        if n_bands != 1:
            raise InputError(
                f"The GeoTIFF {str(path)!r} has {n_bands} bands; a static grid (time=False) "
                "needs one band. Give band_dates= to read the bands as time steps."
            )
        da = da.isel(band=0, drop=True)
        stamps, bounds = None, None
    else:
        if band_dates is None:
            raise InputError(
                f"The GeoTIFF {str(path)!r} has {n_bands} band(s) and no time axis; give "
                "band_dates=[...] with one ISO date (or one (start, end) pair) per band "
                "(--band-dates on the command line), or time=False for a single-band static grid."
            )
        stamps, bounds = parse_band_dates(band_dates, n_bands)
        da = da.rename(band="time").assign_coords(
            time=("time", stamps, {"standard_name": "time", "calendar": "proleptic_gregorian"})
        )
    geographic = bool(crs is not None and crs.is_geographic)
    da = da.drop_vars([c for c in da.coords if c not in ("time", "x", "y")])
    da.attrs = attrs
    # Storage layout for `envlink grid`: band-interleaved files hold one band (time step)
    # per block, which makes point series slow.
    blocks = (block_h, block_w) if static else ((n_bands if pixel_interleaved else 1), block_h, block_w)
    da.encoding["chunksizes"] = blocks
    ds = da.to_dataset(name=name)
    if geographic:
        ds = ds.rename(y="lat", x="lon")
        ds["lat"].attrs = {"units": "degrees_north", "standard_name": "latitude"}
        ds["lon"].attrs = {"units": "degrees_east", "standard_name": "longitude"}
    if bounds is not None:
        ds["time_bnds"] = (("time", "nv"), bounds)
        ds["time"].attrs["bounds"] = "time_bnds"
    return ds, name, (None if geographic else wkt)


def project_sites(
    lat: Sequence[float] | np.ndarray, lon: Sequence[float] | np.ndarray, crs_wkt: str
) -> tuple[np.ndarray, np.ndarray]:
    """Transform WGS84 site coordinates into a grid's CRS with pyproj (``always_xy``).

    Parameters
    ----------
    lat, lon : array-like
        Decimal degrees (WGS84).
    crs_wkt : str
        The grid's ``attrs["crs_wkt"]``.

    Returns
    -------
    (x, y) : tuple of ndarray
        Coordinates in the grid's CRS units (metres for UTM).

    Examples
    --------
    >>> from pyproj import CRS
    >>> x, y = project_sites([-37.0], [147.0], CRS.from_epsg(32755).to_wkt())
    >>> round(float(x[0])), round(float(y[0]))
    (500000, 5905128)
    """
    from pyproj import CRS, Transformer

    try:
        target = CRS.from_wkt(crs_wkt)
    except Exception as exc:  # noqa: BLE001 - pyproj raises its own CRSError
        raise InputError(f"crs_wkt is not a CRS pyproj can read: {exc}") from None
    tr = Transformer.from_crs("EPSG:4326", target, always_xy=True)
    x, y = tr.transform(np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64))
    return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
