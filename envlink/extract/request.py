"""Planning one covariate of ``attach``: its options read through the registries, its times and rows.

:func:`validate` reads every option of one covariate (the vocabularies through
their registries) into a :class:`Request`; :func:`plan_times` adds the grid's time
steps and the baseline (:class:`Times`); :func:`plan_rows` gives each row its site,
window and source (an :class:`~envlink.extract.plan.ExtractionPlan`) and the QA
codes found so far. :class:`TableRows` holds what every covariate of one call reads
from the table and the grid alike (sites, period dates, the grid's layout and time
steps), so several covariates parse them once.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace
from typing import Any, cast

import numpy as np
import pandas as pd
import xarray as xr

from envlink.core.columns import COVARIATE_NAME_RULE, COVARIATE_SUFFIXES, covariate_name_ok
from envlink.core.flags import RowFlags
from envlink.core.registry import Choice
from envlink.core.versions import software_versions
from envlink.errors import InputError, param_error
from envlink.extract.options import parse_baseline
from envlink.extract.plan import ExtractionPlan
from envlink.extract.rules import SPATIAL_RULES, SpatialRule
from envlink.extract.spatial import GridGeometry
from envlink.extract.statistics import STATISTICS, Statistic, parse_statistic
from envlink.extract.stats import Steps, row_spans, within_span
from envlink.extract.windows import (
    TIME_WEIGHTS,
    WINDOWS,
    PeriodDates,
    Window,
    baseline_window,
    period_dates,
    window_bounds,
    without_empty,
)

__all__ = ["Request", "Times", "TableRows", "validate", "plan_times", "plan_rows", "provenance", "CALLER"]

CALLER = "attach"


@dataclass(frozen=True)
class Request:
    """The validated options of one covariate."""

    name: str
    stat: Choice[Any]
    window: Choice[Any]
    spatial: Choice[Any]
    base_years: tuple[int, int] | None
    mmm: float | xr.DataArray | None
    time_weights: str
    min_coverage: float

    @property
    def statistic(self) -> Statistic:
        """The statistic object."""
        return cast(Statistic, self.stat.entry.obj)

    @property
    def rule(self) -> SpatialRule:
        """The spatial rule object."""
        return cast(SpatialRule, self.spatial.entry.obj)


@dataclass(frozen=True)
class Times:
    """The grid's layout and time steps, and the baseline."""

    geom: GridGeometry
    steps: Steps
    calendar: str
    base: tuple[float, float]
    base_label: str
    in_base: np.ndarray


@dataclass
class TableRows:
    """What every covariate of one call reads alike from the table and the grid, read once."""

    table: pd.DataFrame
    grid: xr.DataArray
    _sites: dict[bool, tuple[np.ndarray, ...]] = field(default_factory=dict)
    _periods: dict[str, tuple[PeriodDates, np.ndarray, np.ndarray]] = field(default_factory=dict)
    _geom: GridGeometry | None = None
    _steps: dict[str, Steps] = field(default_factory=dict)
    shared: dict[Any, Any] = field(default_factory=dict)

    @property
    def geom(self) -> GridGeometry:
        """The grid's horizontal layout."""
        if self._geom is None:
            self._geom = GridGeometry(self.grid)
        return self._geom

    def steps(self, calendar: str) -> Steps:
        """The grid's time steps as day numbers in ``calendar``."""
        if calendar not in self._steps:
            self._steps[calendar] = Steps.from_grid(self.grid, calendar)
        return self._steps[calendar]

    def sites(self, needs_wkt: bool) -> tuple[np.ndarray, ...]:
        """Each row's latitude, longitude (in [-180, 180)), polygon text and rejection."""
        if needs_wkt not in self._sites:
            self._sites[needs_wkt] = _site_columns(self.table, needs_wkt)
        return self._sites[needs_wkt]

    def periods(self, calendar: str) -> tuple[PeriodDates, np.ndarray, np.ndarray]:
        """Each row's period as day numbers in ``calendar``, whether it reads, whether it was clipped."""
        if calendar not in self._periods:
            self._periods[calendar] = period_dates(self.table["period_start"], self.table["period_end"], calendar)
        return self._periods[calendar]


def validate(table: pd.DataFrame, grid: xr.DataArray, name: str, *, stat: Any, window: Any, spatial: Any,
             baseline: str | tuple[int, int] | None, mmm: Any, time_weights: str, min_coverage: float,
             threshold: float | None) -> Request:
    """Check every option of one covariate; the vocabularies are read through their registries."""
    if not isinstance(table, pd.DataFrame):
        raise param_error("table", CALLER, "a pandas DataFrame", type(table).__name__)
    if not isinstance(grid, xr.DataArray):
        raise param_error("grid", CALLER, "an xarray.DataArray in envlink's normalised form (envlink.open_grid)",
                          type(grid).__name__)
    if not covariate_name_ok(name):
        raise param_error("name", CALLER, COVARIATE_NAME_RULE, name)
    clash = [name + s for s in COVARIATE_SUFFIXES if name + s in table.columns]
    if clash:
        raise InputError(f"The table already has column {clash[0]!r}; choose another --name so no input column "
                         "is overwritten.")
    st = parse_statistic(stat, threshold)
    win, sp = WINDOWS.parse(window), SPATIAL_RULES.parse(spatial)
    base_years = parse_baseline(baseline)
    weights = TIME_WEIGHTS.parse(time_weights).name
    try:
        min_cov = float(min_coverage)
    except (TypeError, ValueError):
        raise param_error("min_coverage", CALLER, "a fraction from 0 to 1", min_coverage) from None
    if not 0.0 <= min_cov <= 1.0:
        raise param_error("min_coverage", CALLER, "a fraction from 0 to 1", min_coverage)
    mmm = _check_mmm(mmm, cast(Statistic, st.entry.obj))
    from envlink.tables import require_columns

    require_columns(table, ["site_lat", "site_lon", "period_start", "period_end"],
                    what="table (run envlink.locate first)")
    return Request(name, st, win, sp, base_years, mmm, weights, min_cov)


def _check_mmm(mmm: Any, statistic: Statistic) -> float | xr.DataArray | None:
    """``mmm=``: None, a climatology grid, or a finite number, and only where the statistic reads it."""
    if mmm is None:
        return None
    if not statistic.takes_mmm:
        takers = " or ".join(repr(e.name) for e in STATISTICS if e.obj is not None and e.obj.takes_mmm)
        raise param_error("mmm", CALLER, f"given only with stat={takers}", mmm)
    if isinstance(mmm, xr.DataArray):
        return mmm
    allowed = "a finite number in degC or a DataArray with dims (lat, lon)"
    if isinstance(mmm, bool | np.bool_):
        raise param_error("mmm", CALLER, allowed, mmm)
    try:
        value = float(mmm)
    except (TypeError, ValueError):
        raise param_error("mmm", CALLER, allowed, mmm) from None
    if not np.isfinite(value):
        raise param_error("mmm", CALLER, allowed, mmm)
    return value


def plan_times(rows: TableRows, req: Request) -> Times:
    """The grid's geometry and time steps, and the baseline, checked against the statistic."""
    grid = rows.grid
    calendar = str(grid.attrs.get("calendar", "standard"))
    geom = rows.geom
    steps = rows.steps(calendar)
    statistic = req.statistic
    if statistic.needs_daily and not np.allclose(np.median(steps.length), 1.0, atol=0.01):
        raise InputError(f"stat {req.stat.name!r} needs a daily grid; this grid's steps are "
                         f"{np.median(steps.length):g} days long.")
    if req.base_years is None:
        base = (float(steps.t0[0]), float(steps.t1[-1]))
        label = f"{int(steps.year[0])}-{int(steps.year[-1])} (grid span)"
    else:
        base = baseline_window(req.base_years, calendar)
        label = f"{req.base_years[0]}-{req.base_years[1]}"
    in_base = (steps.t0 >= base[0]) & (steps.t1 <= base[1])
    if statistic.needs_baseline and not in_base.any():
        raise InputError(f"The baseline {label} holds no time step of the grid (it covers "
                         f"{int(steps.year[0])}-{int(steps.year[-1])}).")
    return Times(geom, steps, calendar, base, label, in_base)


def provenance(grid: xr.DataArray, req: Request, times: Times) -> dict[str, Any]:
    """The provenance of one covariate's values (its options, the grid, the software)."""
    import json

    mmm = req.mmm
    text = grid.attrs.get("envlink_identity")
    try:
        ident = json.loads(text) if text else None
    except (TypeError, ValueError):
        ident = text
    prov: dict[str, Any] = {
        "grid_identity": ident, "variable": grid.attrs.get("envlink_variable", grid.name),
        "units": req.statistic.units_of(grid.attrs.get("units", "")),
        "stat": req.stat.label(), "window": req.window.label(), "spatial": req.spatial.label(),
        "baseline": times.base_label,
        "mmm": mmm if not isinstance(mmm, xr.DataArray)
        else "grid:" + str(mmm.attrs.get("envlink_identity", mmm.name)),
        "time_weights": req.time_weights, "min_coverage": req.min_coverage, "calendar": times.calendar,
    }
    if isinstance(mmm, xr.DataArray):
        prov["mmm_hash"] = hashlib.sha256(np.ascontiguousarray(mmm.values).tobytes()).hexdigest()
    prov["software"] = software_versions()
    if not req.statistic.needs_baseline:  # the baseline is recorded only where it is used
        del prov["baseline"]
    return prov


def _site_columns(table: pd.DataFrame, needs_wkt: bool) -> tuple[np.ndarray, ...]:
    """Each row's latitude, longitude (in [-180, 180)), polygon text and rejection."""
    n = len(table)
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
    if needs_wkt and "site_wkt" in table:
        wkt = table["site_wkt"].astype("string").fillna("").to_numpy().astype(str)
    else:
        wkt = np.full(n, "").astype(str)
    return lat, lon, wkt, rejected


def plan_rows(rows: TableRows, req: Request, times: Times) -> tuple[ExtractionPlan, RowFlags]:
    """Each row's site, window and source (the plan), with the QA codes found so far."""
    n = len(rows.table)
    statistic, rule = req.statistic, req.rule
    lat, lon, wkt, rejected = rows.sites(rule.needs_wkt)
    dates, dates_ok, clipped = rows.periods(times.calendar)
    rule_w = cast(Window, req.window.entry.obj)
    ws_all, we_all = window_bounds(rule_w, dates, req.window.value, times.calendar)
    dates_ok, clipped, empty = without_empty(dates_ok, clipped, ws_all, we_all)
    flags = RowFlags(n)
    site_ok = ~rejected & np.isfinite(lat) & np.isfinite(lon)
    period_ok = dates_ok | statistic.whole_baseline
    flags.add(~site_ok, "site_rejected")
    flags.add(site_ok & ~period_ok & ~empty, "no_period")
    flags.add(site_ok & ~period_ok & empty, "window_not_in_calendar")
    flags.add(clipped, "date_clipped_to_calendar")
    active = site_ok & period_ok
    gap = rule.in_lon_gap(times.geom, lon, wkt, active)
    flags.add(gap, "outside_grid")
    active &= ~gap
    b0, b1 = times.base
    if statistic.whole_baseline:
        ws, we = np.full(n, b0), np.full(n, b1)
    else:
        ws, we = np.where(dates_ok, ws_all, b0), np.where(dates_ok, we_all, b1)
    spans = row_spans(times.steps, ws, we)
    # Only a window wholly outside the grid's span is outside_grid_time; one inside the
    # span that falls wholly in a gap (a missing day or file) stays active and gets
    # coverage 0 and no_data_in_window, like any other window without data.
    outside = ~spans.has & ~within_span(times.steps, ws, we)
    flags.add(active & outside, "outside_grid_time")
    active &= ~outside
    plan = ExtractionPlan(
        stat=req.stat, window=req.window, spatial=req.spatial, time_weights=req.time_weights,
        min_coverage=req.min_coverage, mmm=req.mmm, geom=times.geom, steps=times.steps,
        calendar=times.calendar, in_base=times.in_base, base=times.base, lat=lat, lon=lon, wkt=wkt,
        active=active, window_start=ws, spans=spans, shared=rows.shared,
    )
    srcs = rule.sources(plan)
    flags.extend(srcs.row_flags)
    return replace(plan, sources=srcs), flags
