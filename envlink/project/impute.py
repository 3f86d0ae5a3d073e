"""``envlink.impute_dates``: carry imprecise sampling dates into the fit by multiple imputation.

For ``draws`` times: draw a plausible window for every row whose dates are vague
(:func:`envlink.locate.plausible.draw_periods`), attach every covariate over the
drawn windows, and fit the model; then pool the fits by Rubin's rules
(:func:`envlink.metareg.pooling.rubin_pool`), with Barnard-Rubin degrees of freedom,
and report how much each coefficient's SE grows because of the imprecise dates.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.columns import COVARIATE_SUFFIXES
from envlink.core.progress import progress_bar
from envlink.errors import EnvlinkWarning, InputError, ModelError
from envlink.extract.attach import attach_many
from envlink.extract.series import CellSeries
from envlink.locate.plausible import draw_periods
from envlink.metareg.model import MetaRegression
from envlink.metareg.pooling import ImputationResult, rubin_pool

__all__ = ["impute_dates", "ATTACH_KEYS"]

#: keys of a covariate spec passed to attach
ATTACH_KEYS = ("stat", "window", "spatial", "baseline", "mmm", "time_weights", "min_coverage",
               "threshold")


def _without(table: pd.DataFrame, names: Sequence[str]) -> pd.DataFrame:
    drop = [c for n in names for c in (n, *(n + s for s in COVARIATE_SUFFIXES)) if c in table]
    return table.drop(columns=drop)


def _attach_all(table: pd.DataFrame, covariates: Sequence[Mapping[str, Any]],
                series: dict[int, CellSeries]) -> pd.DataFrame:
    """Every covariate over one draw's windows, from its grid's shared cell series."""
    for cov in covariates:
        spec = {"name": cov["name"], **{k: cov[k] for k in ATTACH_KEYS if k in cov}}
        table = attach_many(table, cov["grid"], [spec], progress=False, series=series[id(cov["grid"])])
    return table


def _draw_fits(tables: Callable[[int], pd.DataFrame], covariates: Sequence[Mapping[str, Any]],
               draws: int, fit: Callable[[pd.DataFrame], MetaRegression], progress: bool | None,
               cache_dir: str | None, client: Any) -> list[MetaRegression]:
    """The fit of each draw; each grid's cells are read once for every draw (one shared
    :class:`~envlink.extract.series.CellSeries` per grid, through the store under
    ``cache_dir``, on ``client``'s cluster when given)."""
    from envlink.extract.cluster_read import cluster_client

    with cluster_client(client) as opened:
        series: dict[int, CellSeries] = {}
        for cov in covariates:
            if id(cov["grid"]) not in series:
                series[id(cov["grid"])] = CellSeries.for_grid(cov["grid"], cache_dir, show=False,
                                                              client=opened)
        fits = []
        with progress_bar(draws, "imputed dates", "draw", show=progress) as bar:
            for m in range(draws):
                fits.append(fit(_attach_all(tables(m), covariates, series)))
                bar.update(1)
        for cells in series.values():
            cells.flush()  # the series read from the grid, kept in its store (none without one)
    return fits


def impute_dates(table: pd.DataFrame, covariates: Sequence[Mapping[str, Any]], *,
                 effect: str = "effect", variance: str = "variance",
                 moderators: str | None = None, draws: int = 20, seed: int | None = None,
                 effort: str | None = None, period: str | None = None, start: str | None = None,
                 end: str | None = None, locate_options: Mapping[str, Any] | None = None,
                 level: float = 0.95, progress: bool | None = None, cache_dir: str | None = None,
                 client: Any = None, **model_options: Any) -> ImputationResult:
    """Fit the model over ``draws`` plausible date windows and pool by Rubin's rules.

    Parameters
    ----------
    table : pandas.DataFrame
        A located table (:func:`envlink.locate`) with the effect and variance columns
        (covariate columns of the same names are replaced in each draw).
    covariates : sequence of mappings
        One per covariate: ``grid`` (an open grid), ``name`` and any option of
        :func:`envlink.attach` (``stat``, ``window``, ``spatial``, ``baseline``...).
    effect, variance, moderators : str
    draws : int, default 20
        M, the number of completed tables.
    seed : int, optional
    effort : str, optional
        Column of sampling effort in days (vague periods become sub-windows).
    period, start, end : str, optional
        Original period column(s), so ambiguous rows can be read both ways.
    locate_options : mapping, optional
        ``order``, ``plain_season_south``, ``season_months`` as given to locate.
    level : float
    progress : bool, optional
    cache_dir : str, optional
        The cell-series store's folder (see :func:`envlink.attach`): each grid's cells
        are read once for every draw, and from the store when it holds them.
    client : dask.distributed.Client or str, optional
        Read the grids' cells on this Dask cluster, as ``client=`` of :func:`envlink.attach`.
    **model_options
        ``method``, ``test``, ``nested``, ``cluster`` ... of :class:`MetaRegression`.

    Returns
    -------
    ImputationResult
    """
    if not isinstance(draws, int) or draws < 2:
        raise InputError(f"draws must be a whole number >= 2 (Rubin's rules need several "
                         f"completed fits); got {draws!r}.")
    names = [str(c["name"]) for c in covariates]
    plausible = draw_periods(table, draws, seed=seed, effort=effort, period=period, start=start,
                             end=end, **dict(locate_options or {}))
    base = _without(table, names)

    def fit_one(t: pd.DataFrame) -> MetaRegression:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", EnvlinkWarning)
            return MetaRegression(moderators=moderators, level=level, **model_options).fit(
                t, effect=effect, variance=variance)

    fits = _draw_fits(lambda m: plausible.table(base, m), covariates, draws, fit_one, progress,
                      cache_dir, client)
    ks = [f.k_ for f in fits]
    terms = fits[0].terms_
    if any(f.terms_ != terms for f in fits):
        raise ModelError("The draws gave models with different terms (a category missing in some "
                         "draws); impute with fewer categories or more rows.")
    est = np.array([f.coef_ for f in fits])
    var = np.array([f.se_ ** 2 for f in fits])
    df_com = np.inf if fits[0].test_ == "z" else float(np.min([f.df_ for f in fits]))
    pooled = rubin_pool(est, var, terms=list(terms), df_complete=df_com, level=level)
    per_draw = pd.DataFrame(est, columns=list(terms)).assign(k=ks, tau2=[f.tau2_ for f in fits])
    notes = []
    if min(ks) != max(ks):
        notes.append(f"The draws used {min(ks)} to {max(ks)} rows (some drawn windows have no "
                     "covariate value).")
    if plausible.counts["fixed"] == len(table):
        notes.append("No row has imprecise dates to draw (no ambiguous reading, and no vague "
                     "period with a stated sampling effort): every draw is the same table.")
    words = f"{fits[0].method_} model ({moderators or 'no moderators'})"
    if model_options.get("nested"):
        words += f", nested in {model_options['nested']}"
    return ImputationResult(pooled, draws, seed, plausible.counts, per_draw, words, notes)
