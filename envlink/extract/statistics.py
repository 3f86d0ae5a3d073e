"""The statistics of ``attach`` (``stat=`` / ``--stat``): one object per statistic, one registry.

:data:`STATISTICS` maps each name to a :class:`Statistic` holding everything about it:
its argument (``quantile:Q``, ``above:T``), its units rule, whether it needs a
baseline or daily data, whether it takes a threshold, and its computation over a
block of source series. The Python API, the command line, the project file and
the docs read this registry; adding a statistic means adding one object here.
The array kernels live in :mod:`envlink.extract.stats`.

Examples
--------
>>> STATISTICS.parse("Quantile:.5").label(), STATISTICS.parse("above:29").label()
('quantile:0.5', 'above:29')
>>> STATISTICS["dhw-max"].obj.needs_daily, STATISTICS["anomaly"].obj.needs_baseline
(True, True)
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from envlink.core.registry import Arg, Choice, Entry, Registry
from envlink.errors import InputError, param_error
from envlink.extract import climate
from envlink.extract import stats as k

if TYPE_CHECKING:
    from envlink.core.flags import RowFlags
    from envlink.extract.plan import Block, ExtractionPlan

__all__ = ["Statistic", "STATISTICS", "parse_statistic"]

CALLER = "attach"


@dataclass(frozen=True)
class Statistic:
    """A window statistic: its facts and its computation.

    Attributes
    ----------
    name, summary : str
        The registered name and its one-line description.
    kernel : callable, optional
        The window kernel of :mod:`envlink.extract.stats` it applies.
    arg : Arg, optional
        Its argument after a colon.
    units : str
        Units of the result, ``{u}`` standing for the grid's units.
    needs_baseline : bool
        Reads the baseline (``baseline=``).
    needs_daily : bool
        Needs a daily grid.
    takes_threshold : bool
        Its argument is a threshold T, which ``threshold=`` may give instead.
    takes_mmm : bool
        Reads a maximum monthly mean given by ``mmm=`` (else from the baseline).
    whole_baseline : bool
        Computed over the baseline, not each row's window (rows need no period).
    """

    name: str
    summary: str
    kernel: k.Kernel | None = None
    arg: Arg | None = None
    units: str = "{u}"
    needs_baseline: bool = False
    needs_daily: bool = False
    takes_threshold: bool = False
    takes_mmm: bool = False
    whole_baseline: bool = False

    def entry(self) -> Entry[Statistic]:
        """The registry entry of this statistic (``info`` says whether it reads the baseline)."""
        return Entry(self.name, self.summary, obj=self, arg=self.arg,
                     info={"needs_baseline": self.needs_baseline, "units": self.units})

    def units_of(self, grid_units: str) -> str:
        """Units of the values for a grid in ``grid_units``.

        Examples
        --------
        >>> STATISTICS["degree-days"].obj.units_of("degC")
        'degC day'
        """
        return self.units.format(u=grid_units)

    def compute(self, S: np.ndarray, plan: ExtractionPlan, blk: Block, arg: Any) -> tuple[np.ndarray, np.ndarray]:
        """Value and coverage of each row of ``blk`` from its sources' series ``S``."""
        if self.kernel is None:  # a statistic without a window kernel defines its own compute()
            raise TypeError(f"The statistic {self.name!r} has no window kernel and no compute() of its own.")
        return k.window_stat(S, plan.steps, blk.loc, blk.sp, self.kernel, arg, weights=plan.time_weights)

    def explain_no_data(self, plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray,
                        no_data: np.ndarray, flags: RowFlags) -> np.ndarray:
        """Flag rows without a value for a reason of this statistic; return the rest."""
        return no_data

    def final_flags(self, plan: ExtractionPlan, flags: RowFlags) -> None:
        """Add the statistic's own closing QA codes."""


def _baseline_mmm(S: np.ndarray, plan: ExtractionPlan) -> np.ndarray:
    """Each source's maximum monthly mean over the baseline (NaN without data)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmax(climate.monthly_climatology(S, plan.steps, plan.in_base), axis=1)


@dataclass(frozen=True)
class _Anomaly(Statistic):
    def compute(self, S: np.ndarray, plan: ExtractionPlan, blk: Block, arg: Any) -> tuple[np.ndarray, np.ndarray]:
        steps = plan.steps
        keys = steps.month - 1 if steps.monthly else (steps.month - 1) * 31 + steps.day - 1
        clim = climate.climatology(S, keys, 12 if steps.monthly else 372, plan.in_base)
        return k.window_stat(S - clim[:, keys], steps, blk.loc, blk.sp, k.window_mean, weights=plan.time_weights)

    def explain_no_data(self, plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray,
                        no_data: np.ndarray, flags: RowFlags) -> np.ndarray:
        # the cell has data, but no step of the window has a baseline value for its
        # calendar month / day (e.g. 29 February against a baseline of common years)
        if not no_data.any():
            return no_data
        from dataclasses import replace

        from envlink.extract.compute import compute_values
        from envlink.extract.rules import SPATIAL_RULES

        plain = replace(plan, stat=STATISTICS.parse("mean"), spatial=SPATIAL_RULES.parse("nearest"), mmm=None)
        _, raw_cov, _ = compute_values(plain, X, xrow)
        no_base = no_data & (raw_cov > 0)
        flags.add(no_base, "no_baseline_in_window")
        return no_data & ~no_base


@dataclass(frozen=True)
class _MaxMonthlyMean(Statistic):
    def compute(self, S: np.ndarray, plan: ExtractionPlan, blk: Block, arg: Any) -> tuple[np.ndarray, np.ndarray]:
        m = _baseline_mmm(S, plan)
        _, c = k.window_stat(S, plan.steps, blk.loc, blk.sp, k.window_sum, weights=plan.time_weights)
        return m[blk.loc], c


@dataclass(frozen=True)
class _HeatStress(Statistic):
    def compute(self, S: np.ndarray, plan: ExtractionPlan, blk: Block, arg: Any) -> tuple[np.ndarray, np.ndarray]:
        if isinstance(plan.mmm, float):
            m = np.full(blk.b - blk.a, plan.mmm)
        elif plan.mmm is not None:  # a climatology grid, sampled at each source's cell
            srcs = plan.src
            la, lo = plan.geom.cell_latlon(srcs.cells[srcs.ptr[blk.a : blk.b]])
            m = mmm_from_grid(plan.mmm, la, lo)
        else:
            m = _baseline_mmm(S, plan)
        v, c = k.window_stat(climate.dhw_series(S, m), plan.steps, blk.loc, blk.sp, k.window_max, weights=plan.time_weights)
        no_mmm = ~np.isfinite(m[blk.loc])
        blk.flags.add(blk.rows[no_mmm & (c > 0)], "no_mmm")
        return np.where(no_mmm, np.nan, v), c

    def final_flags(self, plan: ExtractionPlan, flags: RowFlags) -> None:
        if plan.spans.has.any():
            short = plan.active & (plan.window_start - plan.steps.t0[0] < climate.DHW_DAYS - 1)
            flags.add(short, "dhw_short_history")


def mmm_from_grid(mmm: Any, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """The maximum monthly mean of a static climatology grid at the nearest cell (NaN outside it)."""
    import xarray as xr

    from envlink.geo import cell_edges

    da = mmm.squeeze([d for d in mmm.dims if d not in ("lat", "lon") and mmm.sizes[d] == 1], drop=True)
    if set(da.dims) != {"lat", "lon"}:
        raise InputError(f"The mmm climatology must have dims (lat, lon); got {tuple(mmm.dims)}.")
    pick = da.sel(lat=xr.DataArray(lat, dims="p"), lon=xr.DataArray(lon, dims="p"), method="nearest")
    values = np.asarray(pick.values, dtype=np.float64)
    # a cell outside the climatology's extent gets no MMM (never the edge value)
    la_e = cell_edges(np.sort(np.asarray(da["lat"].values, dtype=np.float64)))
    lo_e = cell_edges(np.sort(np.asarray(da["lon"].values, dtype=np.float64)))
    span = lo_e[-1] - lo_e[0]
    inside_lon = np.ones(lon.shape, bool) if span >= 360.0 - 1e-6 else (lon >= lo_e[0]) & (lon <= lo_e[-1])
    inside = (lat >= la_e[0]) & (lat <= la_e[-1]) & inside_lon
    return np.where(inside, values, np.nan)


_T = Arg.number("T", expected="T a threshold in the grid's units")

#: The statistics, in the order the docs list them.
STATISTICS: Registry[Statistic] = Registry("statistic", param="stat", caller=CALLER)
for _stat in (
    Statistic("mean", "the time-weighted mean over the steps with data", k.window_mean),
    Statistic("min", "the least value of the overlapping steps with data", k.window_min),
    Statistic("max", "the greatest value of the overlapping steps with data", k.window_max),
    Statistic("sum", "Σ f·v, f the fraction of each step's cell inside the window (1 under `equal` weights)",
              k.window_sum),
    Statistic("std", "the time-weighted population standard deviation (ddof = 0)", k.window_std),
    Statistic("quantile", "the linear-interpolation quantile Q (0 ≤ Q ≤ 1) of the overlapping steps "
              "(unweighted)", k.window_quantile, Arg.number("Q", low=0, high=1)),
    Statistic("above", "the fraction of the time-weighted window with a value above T", k.window_above, _T,
              units="1", takes_threshold=True),
    Statistic("degree-days", "Σ days·max(v − T, 0) over the window's days (whole steps under `equal`)",
              k.window_degree_days, _T, units="{u} day", takes_threshold=True),
    _Anomaly("anomaly", "the window mean of each value minus the baseline mean of its calendar month "
             "(calendar day for daily data)", needs_baseline=True),
    _MaxMonthlyMean("mmm", "the maximum monthly mean of the baseline climatology", needs_baseline=True,
                    whole_baseline=True),
    _HeatStress("dhw-max", "the window's maximum degree heating weeks (°C-weeks), from daily data",
                units="degC week", needs_baseline=True, needs_daily=True, takes_mmm=True),
):
    STATISTICS.add(_stat.entry())


def parse_statistic(stat: str | Choice[Statistic], threshold: float | None = None) -> Choice[Statistic]:
    """Read ``stat=`` with the optional ``threshold=`` of :func:`~envlink.extract.attach.attach`.

    ``threshold=T`` gives the T of ``above`` / ``degree-days`` written without ``:T``;
    with ``:T`` written too it must equal it, and no other statistic takes it.

    Examples
    --------
    >>> parse_statistic("above", threshold=29).label()
    'above:29'
    >>> parse_statistic("Degree_Days:28.0").label()
    'degree-days:28'
    """
    allowed = " or ".join(repr(e.name) for e in STATISTICS if e.obj is not None and e.obj.takes_threshold)
    t = None
    if threshold is not None:
        try:
            t = float(threshold)
        except (TypeError, ValueError):
            t = None
        if t is None or not np.isfinite(t):
            raise param_error("threshold", CALLER, "a finite number in the grid's units", threshold)
    if t is not None and isinstance(stat, str) and ":" not in stat and stat in STATISTICS:
        entry = STATISTICS[stat]
        if entry.obj is not None and entry.obj.takes_threshold:
            return Choice(entry, t)
    choice = STATISTICS.parse(stat)
    if t is not None and not (choice.entry.obj is not None and choice.entry.obj.takes_threshold):
        raise param_error("threshold", CALLER, f"given only with stat {allowed}", threshold)
    if t is not None and t != choice.value:
        raise param_error("threshold", CALLER, f"left out, or equal to the T of stat={stat!r}", threshold)
    return choice
