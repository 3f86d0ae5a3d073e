"""The honest-inference steps of a project run: permutation, scan, imputed dates, model checks.

After the [model] fit, :func:`run_checks` runs what the project asks for — the
permutation test of [model] (``permutations``), the window scan of [scan], the
imputed dates of [imputation], and the checks of [checks] (small-study checks,
Moran's I, a spatial random effect) — and always counts the sites that share a grid
cell for each covariate in the model. :class:`~envlink.metareg.checks.Checks` gathers
the result objects; :class:`~envlink.metareg.checks.FitWithChecks` puts them into the
sections of ``fit.json`` and ``fit.txt`` (``moderator_test.permutation``, ``scan``,
``imputation``, ``diagnostics.small_study``, ``diagnostics.spatial``).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from envlink.core.flags import add_flag
from envlink.errors import EnvlinkError, InputError
from envlink.metareg.checks import Checks, FitWithChecks
from envlink.metareg.formula import formula_columns
from envlink.project.schema import resolve_path, where

__all__ = ["Checks", "FitWithChecks", "run_checks"]


def _model_options(project: Any) -> dict[str, Any]:
    model = project.section("model")
    return {k: model[k] for k in ("method", "test", "nested") if k in model}


def _scan(project: Any, table: pd.DataFrame, grids: dict[str, Any], effect: str,
          variance: str, progress: bool | None, reads: dict[str, Any]) -> Any:
    import envlink
    from envlink.metareg.frame import read_model_columns
    from envlink.project.scan import scan

    s = project.section("scan")
    opts = _model_options(project)
    if s["grid"] not in grids:
        spec = project.section("grids")[s["grid"]]
        grids[s["grid"]] = envlink.open_grid(resolve_path(project.root, spec["path"]),
                                             variable=spec.get("variable"))
    data = read_model_columns(table, effect=effect, variance=variance,
                              moderators=s.get("moderators"), nested=opts.get("nested"))
    attach = {k: s[k] for k in ("spatial", "baseline", "mmm", "min_coverage") if k in s}
    try:
        return scan(data, grids[s["grid"]], effect=effect, variance=variance,
                    lags=s.get("lags", "0..0"), spans=s.get("spans", "1..1"),
                    unit=s.get("unit", "D").upper(), anchors=s.get("anchors", ["start"]),
                    stats=s.get("stats", ["mean"]), moderators=s.get("moderators"),
                    n_permutations=int(s.get("permutations", 1000)), seed=s.get("seed"),
                    scheme=s.get("permute"), progress=progress, **reads, **opts, **attach)
    except EnvlinkError as exc:
        raise type(exc)(f"{where(project, 'scan')} [scan]: {exc}") from exc


def _imputation(project: Any, table: pd.DataFrame, grids: dict[str, Any], effect: str,
                variance: str, progress: bool | None, reads: dict[str, Any]) -> Any:
    from envlink.metareg.frame import read_model_columns
    from envlink.project.impute import ATTACH_KEYS, impute_dates

    imp = project.section("imputation")
    loc = project.section("locate")
    model = project.section("model")
    covs = [{"grid": grids[c["grid"]], "name": c["name"],
             **{k: c[k] for k in ATTACH_KEYS if k in c and not (k == "mmm" and isinstance(c[k], str))}}
            for c in project.covariates]
    for cov, c in zip(covs, project.covariates, strict=True):
        if isinstance(c.get("mmm"), str):  # a climatology grid file
            import envlink

            cov["mmm"] = envlink.open_grid(resolve_path(project.root, c["mmm"]))
    data = read_model_columns(table, effect=effect, variance=variance,
                              moderators=model.get("moderators"), nested=model.get("nested"))
    try:
        return impute_dates(data, covs, effect=effect, variance=variance,
                            moderators=model.get("moderators"), draws=int(imp.get("draws", 20)),
                            seed=imp.get("seed"), effort=imp.get("effort"), period=loc.get("period"),
                            start=loc.get("start"), end=loc.get("end"),
                            locate_options={k: loc[k] for k in ("order", "plain_season_south",
                                                                "season_months") if k in loc},
                            progress=progress, **reads, **_model_options(project),
                            **({"cluster": model["cluster"]} if "cluster" in model else {}))
    except EnvlinkError as exc:
        raise type(exc)(f"{where(project, 'imputation')} [imputation]: {exc}") from exc


def _shared(project: Any, table: pd.DataFrame) -> tuple[pd.DataFrame, list[Any]]:
    """Shared grid cells of each covariate in the model; ``C_flags`` get
    :data:`envlink.metareg.spatial.SHARED_FLAG`."""
    from envlink.metareg.spatial import SHARED_FLAG, shared_cells

    cols = [str(c) for c in table.columns]
    used = formula_columns(project.section("model").get("moderators") or "", cols)
    out = []
    for cov in project.covariates:
        name = cov["name"]
        if name not in used or f"{name}_cell_lat" not in table.columns:
            continue
        s = shared_cells(table, name)
        out.append(s)
        if s.flag.any() and f"{name}_flags" in table.columns:
            flags = table[f"{name}_flags"].fillna("").astype(str).to_numpy(dtype=object)
            add_flag(flags, s.flag, SHARED_FLAG)
            table = table.assign(**{f"{name}_flags": flags})
    return table, out


def run_checks(project: Any, table: pd.DataFrame, fit: Any, grids: dict[str, Any], *,
               effect: str, variance: str, progress: bool | None, cache_dir: str | None = None,
               client: Any = None) -> tuple[pd.DataFrame, Checks]:
    """Every check the project asks for, on the fitted model; the table gains shared-cell flags.

    The window scan and the imputed dates read the grids' cells through the cell-series
    store under ``cache_dir`` (none when None) and on ``client``'s Dask cluster when given.
    """
    reads = {"cache_dir": cache_dir, "client": client}
    model = project.section("model")
    checks = Checks()
    n_perm = int(model.get("permutations", 0))
    if n_perm:
        checks.permutation = fit.permutation_test(n_perm, model.get("seed"),
                                                  scheme=model.get("permute"), progress=progress)
    table, checks.shared = _shared(project, table)
    if project.section("scan"):
        checks.scan = _scan(project, table, grids, effect, variance, progress, reads)
    if project.section("imputation"):
        checks.imputation = _imputation(project, table, grids, effect, variance, progress, reads)
    _model_checks(project, table, fit, checks)
    return table, checks


def _model_checks(project: Any, table: pd.DataFrame, fit: Any, checks: Checks) -> None:
    from envlink.effects.kinds import EFFECT_KINDS
    from envlink.metareg.bias import bias_checks
    from envlink.metareg.spatial import correlogram, residual_moran
    from envlink.metareg.spatial_re import fit_spatial

    c = project.section("checks")
    if c.get("bias"):
        kind = EFFECT_KINDS.parse(project.section("effects")["kind"]).entry
        one = tuple(kind.info["roles"]) == ("events", "total")
        checks.bias = bias_checks(fit, one_group_proportion=one)
    if not (c.get("spatial") or c.get("spatial_effect")):
        return
    if not {"site_lat", "site_lon"} <= set(table.columns):
        raise InputError(f"{where(project, 'checks')}: the spatial checks need located sites.")
    rows = table["fit_included"].to_numpy(dtype=bool)  # the rows the model was fitted to
    lat = pd.to_numeric(table["site_lat"], errors="coerce").to_numpy(np.float64)[rows]
    lon = pd.to_numeric(table["site_lon"], errors="coerce").to_numpy(np.float64)[rows]
    n_perm = int(c.get("spatial_permutations", 999))
    seed = project.section("model").get("seed")
    checks.moran = residual_moran(fit, lat, lon, weights=c.get("spatial", "knn:6"),
                                  n_permutations=n_perm, seed=seed)
    z = fit.standardized_residuals()
    ok = ~z["dropped"].to_numpy(dtype=bool)
    try:
        checks.correlogram = correlogram(z["z"].to_numpy()[ok], lat[ok], lon[ok], seed=seed,
                                         n_permutations=min(n_perm, 199))
    except EnvlinkError:
        checks.correlogram = None
    if c.get("spatial_effect"):
        checks.spatial_effect = fit_spatial(fit, lat, lon)
