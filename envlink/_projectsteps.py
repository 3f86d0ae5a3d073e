"""The steps of a project run: output checks, progress, and each stage with located errors.

Private to :mod:`envlink.project`, whose :func:`~envlink.project.run_project` calls these
in order. Every error a step raises names the project key (and its line) it came from.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from envlink._projectload import Project
from envlink._projectschema import check_columns, formula_columns, resolve_path, where
from envlink._util import probe_writable
from envlink.errors import GridError, InputError

__all__ = [
    "Steps",
    "output_targets",
    "check_writable",
    "read_studies",
    "locate_rows",
    "attach_covariates",
    "add_effects",
    "render_html",
]


def output_targets(project: Project, out: Path) -> dict[str, Path]:
    """The files a run of ``project`` writes in ``out``, by kind (``csv``, ``report``...)."""
    exp = project.section("export")
    name = exp.get("name", "enriched")
    formats = exp.get("formats", ["csv", "parquet", "gpkg"])
    paths: dict[str, Path] = {}
    if "csv" in formats:
        paths.update(csv=out / f"{name}.csv", datapackage=out / "datapackage.json")
    if "parquet" in formats:
        paths["parquet"] = out / f"{name}.parquet"
    if "gpkg" in formats:
        paths["gpkg"] = out / f"{name}.gpkg"
    if "model" in project.data:
        paths.update(fit_json=out / "fit.json", fit_text=out / "fit.txt")
    if exp.get("report", True):
        paths["report"] = out / "report.html"
    return paths


class Steps:
    """A tqdm bar over the pipeline's steps (to stderr) and their wall times."""

    def __init__(self, total: int, progress: bool | None):
        from tqdm.auto import tqdm

        disable = (not sys.stderr.isatty()) if progress is None else not progress
        self.bar = tqdm(total=total, desc="envlink run", unit="step", disable=disable,
                        file=sys.stderr, leave=False)  # fmt: skip
        self.seconds: dict[str, float] = {}
        self._t = time.perf_counter()

    def done(self, name: str) -> None:
        now = time.perf_counter()
        self.seconds[name] = now - self._t
        self._t = now
        self.bar.set_postfix_str(name)
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


def check_writable(folder: Path, where_: str, what: str, advice: str) -> None:
    """Create ``folder`` if needed and check a file can be made in it, before any work."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{where_}Cannot create {what}: {exc.strerror or exc}. {advice}") from exc
    try:
        probe_writable(folder)
    except OSError as exc:
        raise InputError(f"{where_}Cannot write in {what}: {exc.strerror or exc}. {advice}") from exc


def read_studies(project: Project) -> tuple[pd.DataFrame, list[str]]:
    """The studies table as written and its column names, checked against the project."""
    from envlink.export import FORMATS, check_columns_exportable
    from envlink.tables import read_table_as_written

    table = read_table_as_written(project.studies)
    input_columns = [str(c) for c in table.columns]
    check_columns(project, table)
    try:
        check_columns_exportable(input_columns, project.section("export").get("formats", FORMATS))
    except InputError as exc:
        raise InputError(f"{where(project, 'export')}: {exc}") from exc
    return table, input_columns


def locate_rows(project: Project, table: pd.DataFrame, progress: bool | None) -> pd.DataFrame:
    """The [locate] step: the table with its located site and period columns added."""
    import envlink
    from envlink.locate.sites import locate as locate_stage

    loc = project.section("locate")
    if not any(loc.get(k) for k in ("lat", "coords", "site", "period", "start")):
        raise InputError(
            f"{where(project, 'locate')}: the [locate] section must name the studies "
            "table's columns to read: lat and lon, coords, site (with gazetteer), and "
            'period or start and end; e.g. [locate] lat = "latitude", lon = "longitude", '
            'period = "sampled".'
        )
    kwargs = {k: v for k, v in loc.items() if k != "gazetteer"}
    gazetteer = envlink.read_gazetteer(project.gazetteer) if project.gazetteer else None
    try:
        return locate_stage(table, gazetteer=gazetteer, progress=progress, **kwargs)
    except InputError as exc:
        raise InputError(f"{where(project, 'locate')} [locate]: {exc}") from exc


def attach_covariates(
    project: Project, table: pd.DataFrame, cache: Path, progress: bool | None, steps: Steps
) -> tuple[pd.DataFrame, dict[str, Any], dict[str, Any]]:
    """The [[covariates]] steps: the table with every covariate, the open grids, provenance.

    Each grid (and each mmm climatology file) is opened once; ``steps`` is told when
    each covariate is done.
    """
    import envlink

    grids: dict[str, Any] = {}
    climatologies: dict[Path, Any] = {}
    provenance: dict[str, Any] = {}
    for i, cov in enumerate(project.covariates):
        gname = cov["grid"]
        if gname not in grids:
            spec = project.section("grids")[gname]
            try:
                grids[gname] = envlink.open_grid(resolve_path(project.root, spec["path"]),
                                                 variable=spec.get("variable"))  # fmt: skip
            except InputError as exc:
                raise InputError(f"{where(project, 'grids', gname)} [grids.{gname}]: {exc}") from exc
            except GridError as exc:
                raise GridError(f"{where(project, 'grids', gname)} [grids.{gname}]: {exc}") from exc
        options = {k: cov[k] for k in ("stat", "window", "spatial", "baseline", "mmm",
                                       "time_weights", "min_coverage") if k in cov}  # fmt: skip
        recorded = dict(options)
        try:
            if isinstance(options.get("mmm"), str):  # a climatology grid file
                mmm_path = resolve_path(project.root, options["mmm"])
                if mmm_path not in climatologies:
                    climatologies[mmm_path] = envlink.open_grid(mmm_path)
                options["mmm"] = climatologies[mmm_path]
            table = envlink.attach(table, grids[gname], name=cov["name"],
                                   cache_dir=str(cache), progress=progress, **options)
        except InputError as exc:
            raise InputError(
                f"{where(project, 'covariates', i)} (covariate {cov['name']!r}): {exc}"
            ) from exc
        except GridError as exc:
            raise GridError(
                f"{where(project, 'covariates', i)} (covariate {cov['name']!r}): {exc}"
            ) from exc
        stage_prov = dict(table.attrs.get("envlink", {}).get(cov["name"], {}) or {})
        provenance[cov["name"]] = {"grid": gname, **recorded, **stage_prov}
        steps.done(f"attach {cov['name']}")
    return table, grids, provenance


def add_effects(project: Project, table: pd.DataFrame, effect: str, variance: str) -> pd.DataFrame:
    """The [effects] step: the table with the effect, variance and flag columns added."""
    import envlink

    eff = project.section("effects")
    extra = {k: eff[k] for k in ("correction", "zero_cells", "exact", "bias_correction")
             if k in eff}  # fmt: skip
    try:
        return envlink.effect_sizes(table, eff["kind"], name=effect, variance_name=variance,
                                    **extra, **eff.get("columns", {}))  # fmt: skip
    except (InputError, TypeError) as exc:
        raise InputError(f"{where(project, 'effects', 'columns')}: {exc}") from exc


def render_html(project: Project, table: pd.DataFrame, fit: Any, grids: Mapping[str, Any],
                provenance: Mapping[str, Any], **options: Any) -> str:
    """The report's HTML, drawn over the moderator's grid (or the first grid)."""
    from envlink.report import render_report

    covs = project.covariates
    moderator = project.section("export").get("moderator")
    if moderator is None and "model" in project.data:
        mods = formula_columns(project.section("model").get("moderators") or "",
                               [str(c) for c in table.columns])  # fmt: skip
        moderator = mods[0] if mods else None
    field_grid = None
    for cov in covs:
        if cov["name"] == moderator or field_grid is None:
            field_grid = grids[cov["grid"]]
    units = {c: v["units"] for c, v in provenance["covariates"].items() if v.get("units")}
    return render_report(
        table=table, fit=fit, covariates=[c["name"] for c in covs], moderator=moderator,
        field=field_grid, provenance=provenance, windows_tried=max(1, len(covs)),
        title=project.title, label=project.section("studies").get("study"), units=units,
        **options,
    )  # fmt: skip

