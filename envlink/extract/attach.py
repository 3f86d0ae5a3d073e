"""The attach stage: covariates from a grid for every row, each over the row's own window.

:func:`attach` adds one covariate, :func:`attach_many` several (their descriptions:
:mod:`envlink.extract.covariates`). Both are one pipeline of named steps: each
covariate's options are read through the registries and its rows planned
(:mod:`envlink.extract.request`: sites, windows and sources, an
:class:`~envlink.extract.plan.ExtractionPlan`); the cells every covariate needs are
gathered at once (:func:`_prefetch`) from the cell-series store or the grid, each
cell's whole series once (:class:`~envlink.extract.series.CellSeries`); the spatial
rule's ``read`` then takes each covariate's cells from memory; :func:`_compute`
gives the statistic over every row's window and the QA codes; the series read from
the grid are kept in the store; :func:`_assemble` builds the output table and its
provenance.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from envlink.core.columns import COVARIATE_SUFFIXES
from envlink.core.flags import RowFlags
from envlink.errors import EnvlinkError
from envlink.extract.compute import compute_values, sources_without_data
from envlink.extract.covariates import parse_covariates
from envlink.extract.plan import ExtractionPlan
from envlink.extract.request import TableRows, plan_rows, plan_times, provenance, validate
from envlink.extract.series import CellSeries

__all__ = ["attach", "attach_many", "SUFFIXES"]

#: Columns added for a covariate C: C + suffix (kept as an alias of the contract's).
SUFFIXES = COVARIATE_SUFFIXES


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
    time_weights: str = "duration",
    min_coverage: float = 0.5,
    threshold: float | None = None,
    cache_dir: str | None = None,
    progress: bool | None = None,
    client: Any = None,
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
        The covariate's column name C: letters, digits and ``_``, not starting with a
        digit (:data:`envlink.core.columns.COVARIATE_NAME_RULE`, as in a project file).
    stat : str, default "mean"
        A statistic of :data:`envlink.extract.statistics.STATISTICS` (``mean``,
        ``quantile:0.9``, ``above:29``, ``anomaly``, ``dhw-max`` ...).
    window : str, default "period"
        A window of :data:`envlink.extract.windows.WINDOWS` (``period``, ``lag:3M``,
        ``before-start:90D`` ...).
    spatial : str, default "nearest"
        A rule of :data:`envlink.extract.rules.SPATIAL_RULES` (``nearest``,
        ``bilinear``, ``nearest-valid:25km``, ``buffer:50km``, ``polygon``).
        Names are read under one spelling policy (case, ``-``/``_``, ``km`` optional,
        numbers in any decimal form; see docs/extract.md); outputs record the
        canonical label (e.g. ``nearest-valid:25km``).
    baseline : str, optional
        ``"YYYY-YYYY"`` (inclusive years) for ``anomaly``, ``mmm`` and ``dhw-max``;
        default the grid's whole span (recorded in provenance).
    mmm : float or xarray.DataArray, optional
        For ``dhw-max`` only: the maximum monthly mean in °C, or a static climatology
        with dims ``(lat, lon)`` sampled at the nearest cell.
    time_weights : {"duration", "equal"}
        How time steps count (:data:`~envlink.extract.windows.TIME_WEIGHTS`, any spelling;
        docs/extract.md, "Time weights").
    min_coverage : float, default 0.5
        Fraction of the window's days that must have data for a value; below it the
        value is NaN with flag ``below_min_coverage``. For ``nearest-valid`` a cell is
        valid when its coverage reaches this (and is above zero).
    threshold : float, optional
        T for ``stat="above"`` / ``"degree-days"`` given without ``:T``.
    cache_dir : path-like, optional
        envlink's cache folder: the cells' series are kept in its cell-series store
        (``cache_dir/cells``, see :mod:`envlink.extract.store`) and read from there by
        any later request on the same grid and cells. Default: no store (the command
        line uses ``$ENVLINK_CACHE``, else the user's cache folder).
    progress : bool, optional
        Show a progress bar on stderr; default only when stderr is a terminal
        (:mod:`envlink.core.progress`).
    client : dask.distributed.Client or str, optional
        Read the cells on a Dask cluster: a client, or a scheduler's address
        (``"tcp://host:8786"``). Each storage tile is read once, by one worker, and the
        workers write the cell-series store (which then needs a folder every worker
        sees; docs/scaling.md). The values are those of a read on this machine.

    Returns
    -------
    pandas.DataFrame
        A new table: every input row in order, every input column unchanged, plus
        ``C`` (float64), ``C_flags``, ``C_cell_lat``, ``C_cell_lon``,
        ``C_distance_km``, ``C_coverage``; provenance in ``attrs["envlink"][C]``
        (with ``"cells"``: ``"store"``, ``"read"`` or ``"partly store"``, where the
        cells' series came from).

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
    cov = {"name": name, "stat": stat, "window": window, "spatial": spatial, "baseline": baseline, "mmm": mmm,
           "time_weights": time_weights, "min_coverage": min_coverage, "threshold": threshold}
    return _run(table, grid, [cov], cache_dir, progress, client=client)


def attach_many(
    table: pd.DataFrame,
    grid: xr.DataArray,
    covariates: Sequence[str | Mapping[str, Any]],
    *,
    stat: str = "mean",
    window: str = "period",
    spatial: str = "nearest",
    baseline: str | tuple[int, int] | None = None,
    mmm: float | xr.DataArray | None = None,
    time_weights: str = "duration",
    min_coverage: float = 0.5,
    threshold: float | None = None,
    cache_dir: str | None = None,
    progress: bool | None = None,
    series: CellSeries | None = None,
    client: Any = None,
) -> pd.DataFrame:
    """Attach several covariates from one grid, reading each needed cell once for all of them.

    Parameters
    ----------
    table, grid
        As for :func:`attach`.
    covariates : sequence of str or mapping
        Each covariate as text ``"NAME=STAT"`` or ``"NAME=STAT@WINDOW"`` (e.g.
        ``"sst_lag3=mean@lag:3M"``), or a mapping with a ``name`` and any of
        ``stat``, ``window``, ``spatial``, ``baseline``, ``mmm``, ``threshold``,
        ``time_weights``, ``min_coverage`` (see :mod:`envlink.extract.covariates`).
    stat, window, spatial, baseline, mmm, time_weights, min_coverage, threshold
        What a covariate leaves out (as for :func:`attach`).
    cache_dir, progress
        As for :func:`attach`.
    series : CellSeries, optional
        The grid's cell series shared with other calls (e.g. one per candidate window
        of a scan, each with its own table of periods): every cell is read once for all
        of them. Build it with :func:`envlink.extract.series.CellSeries` (with the
        grid's store, :meth:`envlink.extract.store.GridStore.for_grid`); the caller keeps
        its new series in the store with its ``flush()``. ``cache_dir`` and ``client``
        are then unused (the series reads through its own ``client``).
    client : dask.distributed.Client or str, optional
        As for :func:`attach`.

    Returns
    -------
    pandas.DataFrame
        Every input row and column, then the six columns of each covariate in the
        order given; the values equal those of one :func:`attach` call per covariate.

    Raises
    ------
    InputError
        A bad option of one covariate; the exception's ``covariate`` attribute is its
        position in ``covariates``.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(12.0).reshape(3, 2, 2), lat=[0.5, 1.5], lon=[0.5, 1.5])
    >>> t = pd.DataFrame({"site_lat": [1.2], "site_lon": [0.1],
    ...                   "period_start": ["2000-02-01"], "period_end": ["2000-02-29"]})
    >>> out = attach_many(t, g, ["now=mean", "before=mean@lag:1M", "top=max@around-mid:3M"])
    >>> out[["now", "before", "top"]].values.tolist()
    [[6.0, 2.0, 10.0]]
    """
    defaults = {"stat": stat, "window": window, "spatial": spatial, "baseline": baseline, "mmm": mmm,
                "time_weights": time_weights, "min_coverage": min_coverage, "threshold": threshold}
    covs = parse_covariates(covariates, defaults, "attach_many")
    return _run(table, grid, covs, cache_dir, progress, series, client)


def _run(table: pd.DataFrame, grid: xr.DataArray, covs: list[dict[str, Any]], cache_dir: str | None,
         progress: bool | None, shared: CellSeries | None = None, client: Any = None) -> pd.DataFrame:
    """The pipeline (see the module) for covariates already described (on ``client``'s cluster if given)."""
    from envlink.core.processes import close_reader_pool

    try:
        if shared is not None or client is None:
            return _pipeline(table, grid, covs, shared or _series_source(grid, cache_dir, progress), shared is None)
        from envlink.extract.cluster_read import cluster_client

        with cluster_client(client) as opened:
            return _pipeline(table, grid, covs, _series_source(grid, cache_dir, progress, opened), True)
    finally:
        close_reader_pool()  # the reader processes of this call end with it


def _pipeline(table: pd.DataFrame, grid: xr.DataArray, covs: list[dict[str, Any]], cells: CellSeries,
              own: bool) -> pd.DataFrame:
    """The steps (see the module) with the grid's cell series; ``own``: flush it at the end."""
    rows = TableRows(table, grid)
    planned = []
    for i, c in enumerate(covs):
        try:
            req = validate(table, grid, c["name"], stat=c["stat"], window=c["window"], spatial=c["spatial"],
                           baseline=c["baseline"], mmm=c["mmm"], time_weights=c["time_weights"],
                           min_coverage=c["min_coverage"], threshold=c["threshold"])
            times = plan_times(rows, req)
            plan, flags = plan_rows(rows, req, times)
        except EnvlinkError as exc:
            exc.covariate = i  # type: ignore[attr-defined]  # which covariate, for callers that name it
            raise
        planned.append((req, provenance(grid, req, times), plan, flags))
    reqs = [p[0] for p in planned]
    _prefetch(cells, [p[2] for p in planned], reqs[0].name if len(reqs) == 1 else f"{len(reqs)} covariates")
    results = []
    for req, prov, plan, flags in planned:
        X, xrow, plan = plan.rule.read(plan, cells, flags, f"attach {req.name}: reading cells")
        arrays = _compute(plan, X, xrow, flags)
        del X
        results.append((req.name, arrays, {**prov, "cells": cells.origin(plan.src.cells)}))
    stored = cells.flush() if own else "shared"
    for _, _, prov in results:
        prov["store"] = stored
    return _assemble(table, results)


def _series_source(grid: xr.DataArray, cache_dir: str | None, progress: bool | None,
                   client: Any = None) -> CellSeries:
    """The grid's cell series: through its store under ``cache_dir`` (none when None)."""
    return CellSeries.for_grid(grid, cache_dir, show=progress, client=client)


def _prefetch(cells: CellSeries, plans: list[ExtractionPlan], label: str) -> None:
    """Gather the cells of every covariate's sources at once (one pass over the grid)."""
    parts = [p.src.cells for p in plans if p.sources is not None]
    if not parts:
        return
    need = np.unique(np.concatenate(parts))
    halos = [h for h in (p.rule.halo(p) for p in plans) if h is not None]
    halo = (max(h[0] for h in halos), max(h[1] for h in halos)) if halos else None
    if any(p.rule.reads_candidates for p in plans):
        cells.any_valid  # noqa: B018 - learn which cells hold no data while reading
    cells.get(need, desc=f"attach {label}: reading cells", halo=halo)


def _compute(plan: ExtractionPlan, X: np.ndarray, xrow: np.ndarray, flags: RowFlags) -> dict[str, np.ndarray]:
    """Every row's value, coverage, cell and QA codes (the output arrays)."""
    srcs, active = plan.src, plan.active
    said = flags.has("outside_grid") | flags.has("no_valid_cell", prefix=True)
    flags.add(active & (srcs.row_src < 0) & ~said, "outside_grid")
    value, cov, extra = compute_values(plan, X, xrow)
    cov = np.where(active & (srcs.row_src >= 0), cov, 0.0)
    flags.extend(extra)
    got = active & (srcs.row_src >= 0)
    low = got & (cov < plan.min_coverage) & (cov > 0)
    no_data = plan.statistic.explain_no_data(plan, X, xrow, got & (cov == 0), flags)
    land = sources_without_data(plan, X, xrow, no_data)  # cells with no value at any time
    flags.add(land, "cell_on_land")
    flags.add(no_data & ~land, "no_data_in_window")
    flags.add(got & (cov > 0) & (cov < 1.0 - 1e-9), "partial_coverage")
    flags.add(low, "below_min_coverage")
    value = np.where(got & ~low & (cov > 0), value, np.nan)
    plan.statistic.final_flags(plan, flags)
    cla, clo = plan.geom.cell_latlon(np.where(got, srcs.row_cell, -1))
    return {
        "value": value.astype(np.float64), "cell_lat": cla, "cell_lon": clo,
        "distance_km": np.where(got, srcs.row_dist, np.nan), "coverage": np.where(active, cov, np.nan),
        "flags": flags.render().astype(str),
    }


def _assemble(table: pd.DataFrame, results: list[tuple[str, dict[str, np.ndarray], dict[str, Any]]]
              ) -> pd.DataFrame:
    """The input table, then each covariate's six columns; provenance in ``attrs["envlink"]``."""
    new: dict[str, Any] = {}
    meta = dict(table.attrs.get("envlink", {}))
    for name, a, prov in results:
        new[name] = np.asarray(a["value"], dtype=np.float64)
        new[name + "_flags"] = pd.array(np.asarray(a["flags"], dtype=object), dtype="string")
        new[name + "_cell_lat"] = np.asarray(a["cell_lat"], dtype=np.float64)
        new[name + "_cell_lon"] = np.asarray(a["cell_lon"], dtype=np.float64)
        new[name + "_distance_km"] = np.asarray(a["distance_km"], dtype=np.float64)
        new[name + "_coverage"] = np.asarray(a["coverage"], dtype=np.float64)
        meta[name] = prov
    # one concatenation (the index is the table's own, so rows stay as they are)
    out = pd.concat([table, pd.DataFrame(new, index=table.index)], axis=1)
    out.attrs = {**table.attrs, "envlink": meta}
    return out
