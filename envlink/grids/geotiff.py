"""GeoTIFF rasters: bands mapped to user-given dates, CRS kept, and site projection.

A GeoTIFF carries no CF time axis, so the dates of its bands are declared by the
user (``band_dates=``, ``--band-dates``, ``band_dates`` in ``[grids.NAME]``): one date
per band (cells then inferred by the rules of :func:`envlink.grids.timeaxis.infer_cells`),
one ``(start, end)`` pair per band (half-open cells given outright), or an ISO 8601
repeating interval (``R/2001-01-01/P1M``), in the calendar given (``calendar=``). A
GeoTIFF that GDAL made from a netCDF file records the netCDF time axis in
``NETCDF_DIM_*`` tags; its bands take those dates when none are given. The raster is read through rioxarray without
masking or scaling, so the same CF-style decoding applies (nodata as
``_FillValue``, scale and offset as ``scale_factor`` / ``add_offset``).
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from envlink.errors import GridError, InputError

__all__ = ["read_geotiff", "project_sites", "band_times", "BAND_DATES_FORMS"]


_DATE = r"(-?\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2})(?::(\d{2}))?)?"
_DATE_RE = re.compile(rf"^{_DATE}$")
_REPEAT_RE = re.compile(rf"^R(\d*)/{_DATE}/P(\d+)([YMWD])$", re.IGNORECASE)
# the shape of a repeating interval (``R[n]/...``), read before its parts are checked
_REPEAT_SHAPE_RE = re.compile(r"^R\d*/", re.IGNORECASE)
# any ISO 8601 duration (PnYnMnWnDTnHnMnS), of which the reader takes one unit of Y, M, W or D
_ISO_DURATION_RE = re.compile(r"^P(\d+Y)?(\d+M)?(\d+W)?(\d+D)?(T(\d+H)?(\d+M)?(\d+(\.\d+)?S)?)?$", re.I)
#: The calendar of band dates when none is given.
DEFAULT_CALENDAR = "proleptic_gregorian"
TIME_UNITS = "days since 1970-01-01"
BAND_DATES_FORMS = (
    "one ISO date per band ('2001-01-01,2001-02-01'), one interval per band "
    "('2001-01-01/2001-01-08,...', half-open), or a repeating interval "
    "('R/2001-01-01/P1M': one band per month from January 2001; 'R12/...' states the count)"
)


def _fields(value: Any, band: int) -> tuple[int, ...]:
    """(year, month, day, hour, minute, second) of a date text or a date-like object."""
    if isinstance(value, str):
        m = _DATE_RE.match(value.strip())
        if m is None:
            raise InputError(
                f"band_dates: band {band}'s date {value!r} is not an ISO 8601 date; expected "
                "YYYY-MM-DD (or YYYY-MM-DDTHH:MM)."
            )
        return tuple(int(g) if g else 0 for g in m.groups())  # type: ignore[return-value]
    if isinstance(value, np.datetime64):
        value = pd.Timestamp(value)
    try:
        return (int(value.year), int(value.month), int(value.day), int(getattr(value, "hour", 0)),
                int(getattr(value, "minute", 0)), int(getattr(value, "second", 0)))  # fmt: skip
    except (AttributeError, TypeError, ValueError):
        raise InputError(f"band_dates: band {band}'s date {value!r} is not a date.") from None


def _day_numbers(dates: Sequence[tuple[int, ...]], calendar: str, band0: int = 1) -> np.ndarray:
    """Days since 1970-01-01 in ``calendar`` (CF time values) of (y, m, d, H, M, S) tuples."""
    import cftime

    stamps = []
    for i, f in enumerate(dates):
        try:
            stamps.append(cftime.datetime(*f, calendar=calendar))
        except ValueError:
            day = "-".join(f"{v:02d}" for v in f[:3])
            raise InputError(
                f"band_dates: band {band0 + i}'s date {day} is not a day of the {calendar} calendar."
            ) from None
    return np.asarray(cftime.date2num(stamps, TIME_UNITS, calendar=calendar), dtype=np.float64).reshape(-1)


def _repeat_error(text: str) -> InputError:
    """Why ``text``, shaped ``R[n]/...``, is not a repeating interval this reader takes."""
    parts = text.split("/")
    example = "e.g. 'R/2010-01-01/P1M' (one band per month from January 2010)"
    if len(parts) != 3:
        return InputError(
            f"band_dates {text!r} is not an ISO 8601 repeating interval: expected three parts "
            f"R[n]/START/DURATION separated by '/', {example}.", param="band_dates")
    if not _DATE_RE.match(parts[1]):
        return InputError(
            f"band_dates {text!r}: the start {parts[1]!r} is not an ISO 8601 date; expected "
            f"YYYY-MM-DD (or YYYY-MM-DDTHH:MM), {example}.", param="band_dates")
    iso = _ISO_DURATION_RE.match(parts[2]) and parts[2].upper() not in ("P", "PT")
    what = "an ISO 8601 duration this reader does not take" if iso else "not an ISO 8601 duration"
    return InputError(
        f"band_dates {text!r}: the duration {parts[2]!r} is {what}; expected P<n>Y, P<n>M, "
        f"P<n>W or P<n>D (years, months, weeks or days), {example}.", param="band_dates")


def _repeating(m: re.Match[str], n_bands: int, calendar: str) -> np.ndarray:
    """The n_bands + 1 boundaries of an ISO 8601 repeating interval ``Rn/START/PnU``."""
    count, *start, step, unit = m.groups()
    if count and int(count) != n_bands:
        raise InputError(
            f"band_dates {m.group(0)!r} repeats {int(count)} times but the GeoTIFF has {n_bands} "
            "band(s); give 'R/...' to take one interval per band."
        )
    first = tuple(int(g) if g else 0 for g in start)
    k, unit = int(step), unit.upper()
    if unit in ("D", "W"):
        t0 = _day_numbers([first], calendar)[0]
        return t0 + np.arange(n_bands + 1) * k * (7 if unit == "W" else 1)
    import cftime

    bounds = []
    for i in range(n_bands + 1):
        months = (first[0] * 12 + first[1] - 1) + i * k * (12 if unit == "Y" else 1)
        y, mo, day = months // 12, months % 12 + 1, first[2]
        while day > 28:  # the start's day, or the month's last day where the month is shorter
            try:
                cftime.datetime(y, mo, day, calendar=calendar)
                break
            except ValueError:
                day -= 1
        bounds.append((y, mo, day, *first[3:]))
    return _day_numbers(bounds, calendar)


def band_times(band_dates: str | Sequence[Any], n_bands: int, calendar: str | None = None
               ) -> tuple[np.ndarray, np.ndarray | None]:
    """CF time values (days since 1970-01-01 in ``calendar``) of the bands, and their bounds.

    ``band_dates`` is a sequence (one date, or one ``(start, end)`` pair, per band) or a
    text: dates or ``start/end`` intervals separated by commas, or one ISO 8601
    repeating interval ``R[n]/START/P<k><Y|M|W|D>`` (one band per interval). Dates are
    read in ``calendar`` (default proleptic Gregorian), so ``2001-02-30`` is a date of
    the ``360_day`` calendar. Intervals are half-open ``[start, end)``.

    Examples
    --------
    >>> t, b = band_times("2001-01-01, 2001-02-01", 2)
    >>> t.tolist(), b is None
    ([11323.0, 11354.0], True)
    >>> t, b = band_times("R/2001-01-01/P1M", 2, "360_day")
    >>> b.tolist()
    [[11160.0, 11190.0], [11190.0, 11220.0]]
    """
    cal = calendar or DEFAULT_CALENDAR
    if isinstance(band_dates, str):
        text = band_dates.strip()
        if m := _REPEAT_RE.match(text):
            edges = _repeating(m, n_bands, cal)
            return edges[:-1].copy(), np.column_stack([edges[:-1], edges[1:]])
        if _REPEAT_SHAPE_RE.match(text):
            raise _repeat_error(text)
        items: list[Any] = [
            tuple(part.split("/")) if "/" in part else part for part in (p.strip() for p in text.split(",")) if part
        ]
    else:
        items = list(band_dates)
    if len(items) != n_bands:
        raise InputError(
            f"band_dates gives {len(items)} date(s) but the GeoTIFF has {n_bands} band(s); "
            f"give {BAND_DATES_FORMS}, in band order."
        )
    pairs = [isinstance(v, (tuple, list)) for v in items]
    if all(pairs) and items:
        if any(len(v) != 2 for v in items):
            raise InputError("band_dates: an interval must be a (start, end) pair, e.g. '2001-01-01/2001-01-08'.")
        starts = _day_numbers([_fields(v[0], i + 1) for i, v in enumerate(items)], cal)
        ends = _day_numbers([_fields(v[1], i + 1) for i, v in enumerate(items)], cal)
        if np.any(ends <= starts):
            i = int(np.argmax(ends <= starts))
            raise InputError(f"band_dates: band {i + 1}'s interval ends before it starts ({items[i]!r}).")
        return starts, np.column_stack([starts, ends])
    if any(pairs):
        raise InputError("band_dates must be all dates or all (start, end) pairs, not a mix.")
    return _day_numbers([_fields(v, i + 1) for i, v in enumerate(items)], cal), None


def _band_attrs(raw: dict[str, Any], band_units: list[str], tags: dict[str, Any], path: Path,
                name: str) -> dict[str, Any]:
    """The CF attributes of the bands (one value for all bands), units from the band or tags.

    A GeoTIFF that GDAL made from a netCDF file keeps the variable's attributes as
    ``NAME#units`` tags; those count too.
    """
    attrs: dict[str, Any] = {}
    for key in ("_FillValue", "scale_factor", "add_offset", "units"):
        if key not in raw:
            continue
        value = raw[key]
        if isinstance(value, (tuple, list)):
            if len(set(value)) != 1:
                raise InputError(
                    f"The bands of the GeoTIFF {str(path)!r} have different {key} values "
                    f"{tuple(value)}; envlink reads bands of one variable with one {key}."
                )
            value = value[0]
        attrs[key] = value
    for unit in (band_units[0] if band_units else None, tags.get("units"), tags.get(f"{name}#units")):
        if "units" not in attrs and unit:
            attrs["units"] = unit
    for key in ("long_name", "standard_name"):
        if f"{name}#{key}" in tags:
            attrs[key] = tags[f"{name}#{key}"]
    return attrs


def _variable_name(tags: dict[str, Any], band_tags: dict[str, Any], descriptions: list[str], path: Path) -> str:
    """The data variable's name: the ``name`` tag, the netCDF variable GDAL recorded, the one
    band description, or the file stem."""
    one_description = descriptions[0] if len(set(descriptions)) == 1 and descriptions else ""
    name = str(tags.get("name") or band_tags.get("NETCDF_VARNAME") or one_description or path.stem)
    if name in ("x", "y", "lat", "lon", "time", "band", "nv", "spatial_ref", "time_bnds"):
        name = "band_data"  # a file stem that would clash with a coordinate name
    return name


def _netcdf_values(text: str) -> np.ndarray:
    """The numbers of a GDAL netCDF tag: ``{0,31,59}`` (or ``[0. 31. 59.]``)."""
    return np.asarray([float(v) for v in re.split(r"[\s,]+", text.strip("{}[] ")) if v], dtype=np.float64)


def _netcdf_axis(path: Path, tags: dict[str, str], per_band: list[dict[str, str]]
                 ) -> tuple[str, np.ndarray, dict[str, str]] | None:
    """The netCDF axis GDAL wrote the bands along (``NETCDF_DIM_*`` tags): name, values, attributes.

    None when the file has no such tags. Bands along two axes (time and depth) are
    an :class:`InputError`: envlink reads the bands of a GeoTIFF as one axis.
    """
    extra = tags.get("NETCDF_DIM_EXTRA")
    if not extra:
        return None
    dims = [d for d in re.split(r"[\s,]+", extra.strip("{}[] ")) if d]
    if len(dims) != 1:
        raise InputError(
            f"The GeoTIFF {str(path)!r} was made from a netCDF file and its bands run over "
            f"{len(dims)} axes ({', '.join(dims)}); envlink reads a GeoTIFF's bands as one time "
            "axis. Open the netCDF file itself (select= picks a level), or write one level per "
            "GeoTIFF (gdal_translate -b)."
        )
    dim = dims[0]
    key = f"NETCDF_DIM_{dim}"
    try:
        if per_band and all(key in t for t in per_band):
            values = np.asarray([float(t[key]) for t in per_band], dtype=np.float64)
        else:
            values = _netcdf_values(tags[f"{key}_VALUES"])
    except (KeyError, ValueError):
        return None
    attrs = {k.split("#", 1)[1]: v for k, v in tags.items() if k.startswith(f"{dim}#")}
    return dim, values, attrs


def _open_raster(path: Path, chunks: Any) -> tuple[Any, dict[str, Any]]:
    """The raster through rioxarray (no masking or scaling) and facts read with rasterio."""
    try:
        import rasterio
        import rioxarray
    except ImportError as exc:  # pragma: no cover - the geotiff extra is not installed
        raise InputError(
            "Reading GeoTIFF needs the geotiff extra: pip install 'envlink[geotiff]'."
        ) from exc
    try:
        with rasterio.open(path) as src:
            tags = src.tags()
            per_band = [src.tags(i) for i in src.indexes]
            facts = {
                "band_units": [u for u in (src.units or ()) if u],
                "descriptions": [d for d in (src.descriptions or ()) if d],
                "tags": tags, "band_tags": per_band[0] if per_band else {},
                "blocks": src.block_shapes[0],
                "pixel": str(getattr(src.interleaving, "name", "")).lower() == "pixel",
            }  # fmt: skip
        facts["netcdf"] = _netcdf_axis(path, tags, per_band)
        with warnings.catch_warnings():
            # rioxarray's own use of deprecated dask/affine calls, not the user's concern
            warnings.simplefilter("ignore", FutureWarning)
            warnings.simplefilter("ignore", PendingDeprecationWarning)
            da = rioxarray.open_rasterio(path, mask_and_scale=False, chunks=chunks)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001 - any failure of the reader is an unreadable file
        raise GridError(f"Cannot open the GeoTIFF {str(path)!r}: {exc}") from None
    if isinstance(da, list):  # pragma: no cover - subdatasets
        raise GridError(f"The GeoTIFF {str(path)!r} holds several subdatasets; open one of them.")
    # rioxarray names the band axis after a netCDF axis it finds in the tags: one name here
    axis = next((d for d in da.dims if d not in ("y", "x")), "band")
    return (da.rename({axis: "band"}) if axis != "band" else da), facts


def _time_axis(path: Path, band_dates: str | Sequence[Any] | None, calendar: str | None, n_bands: int,
               netcdf: tuple[str, np.ndarray, dict[str, str]] | None) -> tuple[np.ndarray, dict[str, Any], Any]:
    """The raw CF time values of the bands, their attributes and bounds (None when inferred)."""
    if band_dates is not None:
        cal = calendar or DEFAULT_CALENDAR
        values, bounds = band_times(band_dates, n_bands, cal)
        return values, {"standard_name": "time", "units": TIME_UNITS, "calendar": cal}, bounds
    if netcdf is not None and " since " in netcdf[2].get("units", ""):
        dim, values, attrs = netcdf
        return values, {"standard_name": "time", **attrs}, None
    what = f"{n_bands} band(s) and no time axis"
    if netcdf is not None:
        what = f"{n_bands} band(s) along the netCDF axis {netcdf[0]!r}, which is not time"
    raise InputError(
        f"The GeoTIFF {str(path)!r} has {what}; give band_dates= with {BAND_DATES_FORMS}, "
        "or time=False for a single-band static grid."
    )


def read_geotiff(
    path: Path, *, band_dates: str | Sequence[Any] | None, chunks: Any, static: bool,
    calendar: str | None = None,
) -> tuple[xr.Dataset, str, str | None]:
    """Read a GeoTIFF into a raw (undecoded) Dataset with a CF ``time`` axis.

    The bands' dates come from ``band_dates`` (see :func:`band_times`; read in
    ``calendar``), else from the netCDF time axis GDAL recorded in the file's
    ``NETCDF_DIM_*`` tags when it was made from a netCDF file. Returns the dataset,
    the data variable's name and the CRS as WKT (None when the file has no CRS).
    Geographic CRSs give ``lat``/``lon`` coordinates in degrees; projected ones keep
    ``y``/``x``.
    """
    da, facts = _open_raster(path, chunks)
    crs = da.rio.crs
    wkt = crs.to_wkt() if crs is not None else None
    tags = facts["tags"]
    name = _variable_name(tags, facts["band_tags"], facts["descriptions"], path)
    attrs = _band_attrs(da.attrs, facts["band_units"], tags, path, name)
    n_bands = int(da.sizes["band"])
    bounds = None
    if static:
        if n_bands != 1:
            raise InputError(
                f"The GeoTIFF {str(path)!r} has {n_bands} bands; a static grid (time=False) "
                "needs one band. Give band_dates= to read the bands as time steps."
            )
        da = da.isel(band=0, drop=True)
    else:
        values, time_attrs, bounds = _time_axis(path, band_dates, calendar, n_bands, facts["netcdf"])
        da = da.rename(band="time").assign_coords(time=("time", values, time_attrs))
    geographic = bool(crs is not None and crs.is_geographic)
    da = da.drop_vars([c for c in da.coords if c not in ("time", "x", "y")])
    da.attrs = attrs
    # Storage layout for `envlink grid`: band-interleaved files hold one band (time step)
    # per block, which makes point series slow.
    block_h, block_w = facts["blocks"]
    blocks = (block_h, block_w) if static else ((n_bands if facts["pixel"] else 1), block_h, block_w)
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
