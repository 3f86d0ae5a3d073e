"""The attach stage: one covariate per row from a grid, over each row's own window.

See :func:`attach`. The stage reads each needed cell's full series once (by storage
tiles, :mod:`envlink.extract.reader`), combines cells into sources
(:mod:`envlink.extract.sources`), and computes window statistics for all rows of a
block of sources at once (:mod:`envlink.extract.stats`).
"""

from __future__ import annotations

import hashlib
import json
import sys
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from envlink.errors import InputError, param_error
from envlink.extract import cache as _cache
from envlink.extract.compute import compute_values, nearest_valid
from envlink.extract.flags import RowFlags
from envlink.extract.options import (
    StatSpec,
    parse_baseline,
    parse_spatial,
    parse_stat,
    parse_window,
)
from envlink.extract.reader import read_cells
from envlink.extract.sources import area_sources, point_sources
from envlink.extract.spatial import GridGeometry
from envlink.extract.stats import Steps, row_spans
from envlink.extract.windows import baseline_window, row_windows
from envlink.tables import require_columns

__all__ = ["attach", "SUFFIXES"]

#: Columns added for a covariate C: C + suffix.
SUFFIXES = ("", "_flags", "_cell_lat", "_cell_lon", "_distance_km", "_coverage")
_UNITS = {"above": "1", "degree-days": "{u} day", "dhw-max": "degC week", "std": "{u}"}


def _progress(show: bool | None, n_rows: int, total: int, desc: str):  # noqa: ANN202
    from tqdm.auto import tqdm

    enabled = (n_rows >= 20_000) if show is None else bool(show)
    return tqdm(total=total, desc=desc, unit="cell", file=sys.stderr, disable=not enabled, leave=False)


def _versions() -> dict[str, str]:
    import scipy

    from envlink import __version__

    return {
        "envlink": __version__,
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "xarray": xr.__version__,
        "scipy": scipy.__version__,
    }


def attach(
    table: pd.DataFrame,
    grid: xr.DataArray,
    *,
    name: str,
    stat: str = "mean",
    window: str = "period",
    spatial: str = "nearest",
    baseline: str | tuple[int, int] | None = None,
    mmm: float | xr.DataArray | None = None,
    time_weights: Literal["duration", "equal"] = "duration",
    min_coverage: float = 0.5,
    threshold: float | None = None,
    cache_dir: str | None = None,
    progress: bool | None = None,
) -> pd.DataFrame:
    """Attach one covariate to every row of a located table.

    Parameters
    ----------
    table : pandas.DataFrame
        Rows with the columns of the locate stage: ``site_lat``, ``site_lon``
        (degrees), ``period_start``, ``period_end`` (ISO dates, inclusive); optional
        ``locate_status`` (rows ``rejected`` get NaN) and ``site_wkt`` (polygon WKT in
        lon/lat, used by ``spatial="polygon"``).
    grid : xarray.DataArray
        A normalised grid (see :mod:`envlink.testing`), e.g. from
        :func:`envlink.open_grid`; may be lazy (dask or file-backed).
    name : str
        The covariate's column name C.
    stat : str, default "mean"
        ``mean``, ``min``, ``max``, ``sum``, ``std``, ``quantile:Q``, ``above:T``,
        ``degree-days:T``, ``anomaly``, ``mmm``, ``dhw-max``.
    window : str, default "period"
        ``period``, ``lag:N{D|M|Y}``, ``before-start:N…``, ``after-end:N…``,
        ``around-mid:N…``.
    spatial : str, default "nearest"
        ``nearest``, ``bilinear``, ``nearest-valid:Dkm``, ``buffer:Rkm``, ``polygon``.
    baseline : str, optional
        ``"YYYY-YYYY"`` (inclusive years) for ``anomaly``, ``mmm`` and ``dhw-max``;
        default the grid's whole span (recorded in provenance).
    mmm : float or xarray.DataArray, optional
        For ``dhw-max`` only: the maximum monthly mean in °C, or a static climatology
        with dims ``(lat, lon)`` sampled at the nearest cell.
    time_weights : {"duration", "equal"}
        How time steps count (DESIGN.md §4).
    min_coverage : float, default 0.5
        Fraction of the window's days that must have data for a value; below it the
        value is NaN with flag ``below_min_coverage``. For ``nearest-valid`` a cell is
        valid when its coverage reaches this (and is above zero).
    threshold : float, optional
        T for ``stat="above"`` / ``"degree-days"`` given without ``:T``.
    cache_dir : path-like, optional
        Cache results there (see :mod:`envlink.extract.cache`); default no cache.
    progress : bool, optional
        Show a progress bar on stderr; default when the table has 20,000 rows or more.

    Returns
    -------
    pandas.DataFrame
        A new table: every input row in order, every input column unchanged, plus
        ``C`` (float64), ``C_flags``, ``C_cell_lat``, ``C_cell_lon``,
        ``C_distance_km``, ``C_coverage``; provenance in ``attrs["envlink"][C]``.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(12.0).reshape(3, 2, 2), lat=[0.5, 1.5], lon=[0.5, 1.5])
    >>> t = pd.DataFrame({"site_lat": [1.2, 9.0], "site_lon": [0.1, 0.1],
    ...                   "period_start": ["2000-01-01"] * 2, "period_end": ["2000-02-29"] * 2})
    >>> out = attach(t, g, name="sst")
    >>> out["sst"].round(4).tolist(), out["sst_flags"].tolist()  # (31*2 + 29*6) / 60
    ([3.9333, nan], ['', 'outside_grid'])
    """
    caller = "attach"
    if not isinstance(table, pd.DataFrame):
        raise param_error("table", caller, "a pandas DataFrame", type(table).__name__)
    if not isinstance(grid, xr.DataArray):
        raise param_error("grid", caller, "an xarray.DataArray in envlink's normalised form (envlink.open_grid)", type(grid).__name__)
    if not isinstance(name, str) or not name.strip():
        raise param_error("name", caller, "a non-empty column name", name)
    clash = [name + s for s in SUFFIXES if name + s in table.columns]
    if clash:
        raise InputError(f"The table already has column {clash[0]!r}; choose another --name so no input column is overwritten.")
    st, win, sp_rule = parse_stat(stat, threshold), parse_window(window), parse_spatial(spatial)
    if threshold is not None and st.kind not in ("above", "degree-days"):
        raise param_error("threshold", caller, "given only with stat 'above' or 'degree-days'", threshold)
    if threshold is not None and st.threshold is not None and float(threshold) != st.threshold:
        raise param_error("threshold", caller, f"left out, or equal to the T of stat={stat!r}", threshold)
    base_years = parse_baseline(baseline)
    if time_weights not in ("duration", "equal"):
        raise param_error("time_weights", caller, "'duration' or 'equal'", time_weights)
    try:
        min_cov = float(min_coverage)
    except (TypeError, ValueError):
        raise param_error("min_coverage", caller, "a fraction from 0 to 1", min_coverage) from None
    if not 0.0 <= min_cov <= 1.0:
        raise param_error("min_coverage", caller, "a fraction from 0 to 1", min_coverage)
    if mmm is not None and st.kind != "dhw-max":
        raise param_error("mmm", caller, "given only with stat='dhw-max'", mmm)
    if mmm is not None and not isinstance(mmm, xr.DataArray):
        mmm_allowed = "a finite number in degC or a DataArray with dims (lat, lon)"
        if isinstance(mmm, bool | np.bool_):
            raise param_error("mmm", caller, mmm_allowed, mmm)
        try:
            mmm = float(mmm)
        except (TypeError, ValueError):
            raise param_error("mmm", caller, mmm_allowed, mmm) from None
        if not np.isfinite(mmm):
            raise param_error("mmm", caller, mmm_allowed, mmm)
    require_columns(table, ["site_lat", "site_lon", "period_start", "period_end"], what="table (run envlink.locate first)")

    geom = GridGeometry(grid)
    calendar = str(grid.attrs.get("calendar", "standard"))
    steps = Steps.from_grid(grid, calendar)
    if st.kind == "dhw-max" and not np.allclose(np.median(steps.length), 1.0, atol=0.01):
        raise InputError(f"stat 'dhw-max' needs a daily grid; this grid's steps are {np.median(steps.length):g} days long.")
    if base_years is None:
        b0, b1 = float(steps.t0[0]), float(steps.t1[-1])
        base_label = f"{int(steps.year[0])}-{int(steps.year[-1])} (grid span)"
    else:
        b0, b1 = baseline_window(base_years, calendar)
        base_label = f"{base_years[0]}-{base_years[1]}"
    in_base = (steps.t0 >= b0) & (steps.t1 <= b1)
    if st.kind in ("anomaly", "mmm", "dhw-max") and not in_base.any():
        raise InputError(f"The baseline {base_label} holds no time step of the grid (it covers {int(steps.year[0])}-{int(steps.year[-1])}).")

    n = len(table)
    options = {
        "stat": st.label(), "window": win.label(), "spatial": sp_rule.label(), "baseline": base_label,
        "mmm": (mmm if not isinstance(mmm, xr.DataArray) else "grid:" + str(mmm.attrs.get("envlink_identity", mmm.name))),
        "time_weights": time_weights, "min_coverage": min_cov, "calendar": calendar,
    }
    if isinstance(mmm, xr.DataArray):
        options["mmm_hash"] = hashlib.sha256(np.ascontiguousarray(mmm.values).tobytes()).hexdigest()
    prov = {
        "grid_identity": _identity(grid), "variable": grid.attrs.get("envlink_variable", grid.name),
        "units": _UNITS.get(st.kind, "{u}").format(u=grid.attrs.get("units", "")), **options,
        "software": _versions(),
    }
    key = _cache.request_key(grid, table, options) if cache_dir is not None else None
    cached = _cache.load(cache_dir, key, n) if key is not None and cache_dir is not None else None
    if cached is not None:
        prov["cache"] = "hit"
        return _assemble(table, name, cached, prov)

    lat = pd.to_numeric(table["site_lat"], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    lon = pd.to_numeric(table["site_lon"], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    lat = np.where(np.isfinite(lat) & (np.abs(lat) <= 90.0), lat, np.nan)
    fin = np.isfinite(lon)
    lon = np.where(fin, np.mod(np.where(fin, lon, 0.0) + 180.0, 360.0) - 180.0, np.nan)
    rejected = (
        (table["locate_status"].astype("string") == "rejected").fillna(False).to_numpy(dtype=bool)
        if "locate_status" in table
        else np.zeros(n, dtype=bool)
    )
    wins = row_windows(table["period_start"], table["period_end"], win, calendar)
    flags = RowFlags(n)
    site_ok = ~rejected & np.isfinite(lat) & np.isfinite(lon)
    period_ok = wins.ok | (st.kind == "mmm")
    flags.add(~site_ok, "site_rejected")
    flags.add(site_ok & ~period_ok, "no_period")
    flags.add(wins.clipped, "date_clipped_to_calendar")
    active = site_ok & period_ok
    wkt = table["site_wkt"].astype("string").fillna("").to_numpy() if "site_wkt" in table else np.full(n, "")
    wkt = wkt.astype(str)
    gap = _in_lon_gap(geom, lon) & active
    if sp_rule.kind == "polygon" and _lon_gaps(geom):
        has_wkt = np.char.str_len(np.char.strip(wkt)) > 0
        gap = np.where(has_wkt, _polygon_in_lon_gap(geom, wkt, active & has_wkt), gap)
    flags.add(gap, "outside_grid")
    active &= ~gap
    ws = np.where(wins.ok, wins.start, b0)
    we = np.where(wins.ok, wins.end, b1)
    if st.kind == "mmm":
        ws, we = np.full(n, b0), np.full(n, b1)
    spans = row_spans(steps, ws, we)
    off_time = active & ~spans.has
    flags.add(off_time, "outside_grid_time")
    active &= spans.has

    if sp_rule.kind == "polygon":
        srcs = area_sources(geom, lat, lon, wkt, active)
    else:
        srcs = point_sources(geom, lat, lon, active, sp_rule.kind, sp_rule.km)
    flags.extend(srcs.row_flags)
    show = progress
    if sp_rule.kind == "nearest-valid":
        km = float(sp_rule.km or 0.0)
        X, srcs = nearest_valid(grid, geom, steps, spans, srcs, lat, lon, active, km, min_cov, flags, show)
        xrow = np.arange(srcs.cells.size)
    else:
        cells, xrow = np.unique(srcs.cells, return_inverse=True)
        with _progress(show, n, cells.size, f"attach {name}: reading cells") as bar:
            X = read_cells(grid, cells, progress=bar.update)
    said = flags.has("outside_grid") | flags.has("no_valid_cell", prefix=True)
    flags.add(active & (srcs.row_src < 0) & ~said, "outside_grid")
    value, cov, extra = compute_values(
        X, xrow.ravel(), srcs, steps, spans, st, time_weights, in_base, mmm, geom, sp_rule.kind
    )
    cov = np.where(active & (srcs.row_src >= 0), cov, 0.0)
    flags.extend(extra)
    got = active & (srcs.row_src >= 0)
    low = got & (cov < min_cov) & (cov > 0)
    no_data = got & (cov == 0)
    if st.kind == "anomaly" and no_data.any():
        # the cell has data, but no step of the window has a baseline value for its
        # calendar month / day (e.g. 29 February against a baseline of common years)
        _, raw_cov, _ = compute_values(
            X, xrow.ravel(), srcs, steps, spans, StatSpec("mean"), time_weights, in_base, None, geom, "nearest"
        )
        no_base = no_data & (raw_cov > 0)
        flags.add(no_base, "no_baseline_in_window")
        no_data &= ~no_base
    flags.add(no_data, "no_data_in_window")
    flags.add(got & (cov > 0) & (cov < 1.0 - 1e-9), "partial_coverage")
    flags.add(low, "below_min_coverage")
    value = np.where(got & ~low & (cov > 0), value, np.nan)
    if st.kind == "dhw-max" and spans.has.any():
        short = active & (ws - steps.t0[0] < 83)
        flags.add(short, "dhw_short_history")
    cla, clo = geom.cell_latlon(np.where(got, srcs.row_cell, -1))
    arrays = {
        "value": value.astype(np.float64), "cell_lat": cla, "cell_lon": clo,
        "distance_km": np.where(got, srcs.row_dist, np.nan), "coverage": np.where(active, cov, np.nan),
        "flags": flags.render().astype(str),
    }
    if key is not None and cache_dir is not None:
        stored = _cache.save(cache_dir, key, arrays)
        prov["cache"] = "stored" if stored is not None else "not stored"
    return _assemble(table, name, arrays, prov)


def _in_lon_gap(geom: GridGeometry, lon: np.ndarray) -> np.ndarray:
    """Sites in a longitude gap of a regional lat/lon grid (one crossing the antimeridian).

    A regional grid from 170°E to 170°W is stored, in [-180, 180), as -179.5 … -170.5
    then 170.5 … 179.5: its centres jump across the longitudes it does not cover. A
    site in that jump (e.g. at 0°) is beyond the grid's edges, never in the cells on
    either side of it. Only grids whose centres run on across ±180° are looked at
    (so stretched regional grids are left alone); the jump is a spacing over 1.5
    times the median, and the covered part ends half a (neighbouring) step past
    each centre.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.zeros((1, 1, 4)), lat=[0.5], lon=[-179.5, -178.5, 178.5, 179.5])
    >>> _in_lon_gap(GridGeometry(g), np.array([179.9, -178.1, 0.0, 177.5])).tolist()
    [False, False, True, True]
    """
    out = np.zeros(lon.shape, dtype=bool)
    for left, right in _lon_gaps(geom):
        out |= (lon > left + 1e-9) & (lon < right - 1e-9)
    return out


def _lon_gaps(geom: GridGeometry) -> list[tuple[float, float]]:
    """The uncovered longitude intervals of a regional grid across ±180° (see above)."""
    if geom.kind != "regular" or geom.is_global or geom.lon.size < 3:
        return []
    c = np.asarray(geom.lon, dtype=np.float64)
    d = np.diff(c)
    step = float(np.median(d))
    if c[0] + 360.0 - c[-1] > 1.5 * step:  # does not run on across ±180°: no such gap
        return []
    gaps = []
    for k in np.nonzero(d > 1.5 * step)[0]:
        left = c[k] + 0.5 * (d[k - 1] if k > 0 else step)
        right = c[k + 1] - 0.5 * (d[k + 1] if k + 1 < d.size else step)
        gaps.append((float(left), float(right)))
    return gaps


def _polygon_in_lon_gap(geom: GridGeometry, wkt: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rows (of ``rows``) whose polygon has every vertex in the grid's longitude gap."""
    import shapely

    out = np.zeros(wkt.shape, dtype=bool)
    idx = np.nonzero(rows)[0]
    if idx.size == 0:
        return out
    try:
        geoms = shapely.from_wkt(wkt[idx], on_invalid="ignore")
    except shapely.errors.ShapelyError:
        return out
    xy, part = shapely.get_coordinates(geoms, return_index=True)
    if part.size == 0:
        return out
    lon = np.mod(xy[:, 0] + 180.0, 360.0) - 180.0
    inside = _in_lon_gap(geom, lon)
    n_all = np.bincount(part, minlength=idx.size)
    n_gap = np.bincount(part, weights=inside.astype(np.float64), minlength=idx.size)
    out[idx] = (n_all > 0) & (n_gap == n_all)
    return out


def _identity(grid: xr.DataArray) -> object:
    text = grid.attrs.get("envlink_identity")
    try:
        return json.loads(text) if text else None
    except (TypeError, ValueError):
        return text


def _assemble(table: pd.DataFrame, name: str, a: dict[str, np.ndarray], prov: dict[str, object]) -> pd.DataFrame:
    out = table.copy()
    out[name] = np.asarray(a["value"], dtype=np.float64)
    out[name + "_flags"] = pd.array(np.asarray(a["flags"], dtype=object), dtype="string")
    out[name + "_cell_lat"] = np.asarray(a["cell_lat"], dtype=np.float64)
    out[name + "_cell_lon"] = np.asarray(a["cell_lon"], dtype=np.float64)
    out[name + "_distance_km"] = np.asarray(a["distance_km"], dtype=np.float64)
    out[name + "_coverage"] = np.asarray(a["coverage"], dtype=np.float64)
    meta = dict(table.attrs.get("envlink", {}))
    meta[name] = prov
    out.attrs = {**table.attrs, "envlink": meta}
    return out
