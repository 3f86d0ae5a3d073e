"""The steps of a project run: output checks, the progress bar, each stage with located errors.

:func:`envlink.project.run_project` calls these in order. Every error a step raises
names the project key (and its line) it came from.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from envlink.core.columns import COVARIATE_SUFFIXES as SUFFIXES
from envlink.core.outputs import check_output_paths
from envlink.core.progress import progress_bar
from envlink.core.util import did_you_mean, probe_writable
from envlink.effects.core import ZERO_CELL_RULES
from envlink.effects.kinds import EFFECT_KINDS, OPTIONS
from envlink.errors import GridError, InputError
from envlink.export.formats import DEFAULT_FORMATS, output_paths
from envlink.extract.statistics import STATISTICS as _STATISTICS
from envlink.project.load import Project
from envlink.project.schema import (
    check_columns,
    check_files,
    project_inputs,
    resolve_grid_path,
    resolve_path,
    where,
)

__all__ = [
    "Steps",
    "output_targets",
    "prepare_outputs",
    "check_writable",
    "read_studies",
    "locate_rows",
    "attach_covariates",
    "grid_options",
    "effect_settings",
    "add_effects",
    "check_effect_keys",
    "render_html",
]


def output_targets(project: Project, out: Path) -> dict[str, Path]:
    """The files a run of ``project`` writes in ``out``, by kind (``csv``, ``report``...)."""
    exp = project.section("export")
    paths = output_paths(out, exp.get("name", "enriched"), exp.get("formats", DEFAULT_FORMATS),
                         fit="model" in project.data)  # fmt: skip
    if exp.get("report", True):
        paths["report"] = out / "report.html"
    return paths


def prepare_outputs(project: Project, out: Path, force: bool) -> dict[str, Path]:
    """Check, before any work, that the run can write its outputs; return them (:func:`output_targets`).

    The output folder (and the cache folder) must be folders that can be written, no
    output may be an input, and an existing output needs ``force``.
    """
    if out.exists() and not out.is_dir():
        raise InputError(
            f"The output folder {str(out)!r} is a file; give a folder (it is created if "
            "missing) with --out DIR or [project] out."
        )
    targets = output_targets(project, out)
    check_files(project)
    check_writable(out, "", f"the output folder {str(out)!r}", "Choose another folder with --out DIR.")
    check_output_paths(targets.values(), force=force, inputs=project_inputs(project))
    if project.cache_dir is not None:
        check_writable(project.cache_dir, f"{where(project, 'project', 'cache_dir')}: ",
                       f"the cache folder {str(project.cache_dir)!r}",
                       "Choose another [project] cache_dir, or remove the key to use the user's cache "
                       "folder.")  # fmt: skip
    return targets


class Steps:
    """A progress bar over the pipeline's steps (see :mod:`envlink.core.progress`) and their wall times."""

    def __init__(self, total: int, progress: bool | None):
        self.bar = progress_bar(total, "envlink run", "step", progress)
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
    from envlink.export import check_columns_exportable
    from envlink.tables import read_table_as_written

    table = read_table_as_written(project.studies)
    input_columns = [str(c) for c in table.columns]
    check_effect_keys(project)
    check_columns(project, table)
    try:
        check_columns_exportable(input_columns, project.section("export").get("formats", DEFAULT_FORMATS))
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
    project: Project, table: pd.DataFrame, cache: Path | None, progress: bool | None, steps: Steps,
    client: Any = None,
) -> tuple[pd.DataFrame, dict[str, Any], dict[str, Any]]:
    """The [[covariates]] steps: the table with every covariate, the open grids, provenance.

    Each grid (and each mmm climatology file) is opened once, and the covariates of
    one grid are computed together (:func:`envlink.attach_many`): each needed cell's
    series is read once, from the cell-series store in ``cache`` (none when None) or
    the grid (on the Dask cluster of ``client`` when given). Columns follow the file's
    order; ``steps`` is told when each covariate is done.
    """
    grids: dict[str, Any] = {}
    by_grid: dict[str, list[int]] = {}
    covs = project.covariates
    for i, cov in enumerate(covs):
        by_grid.setdefault(cov["grid"], []).append(i)
    added: dict[int, pd.DataFrame] = {}
    stage_prov: dict[str, Any] = {}
    for gname, members in by_grid.items():
        grids[gname] = _open_grid(project, gname)
        out = _attach_group(project, table, grids[gname], members, cache, progress, client)
        stage_prov.update(out.attrs.get("envlink", {}))
        for i in members:
            added[i] = out[[covs[i]["name"] + s for s in SUFFIXES]]
            steps.done(f"attach {covs[i]['name']}")
    result = pd.concat([table, *(added[i] for i in range(len(covs)))], axis=1) if covs else table
    result.attrs = {**table.attrs, "envlink": {**table.attrs.get("envlink", {}), **stage_prov}}
    provenance: dict[str, Any] = {}
    for cov in covs:
        recorded = {k: cov[k] for k in _OPTIONS if k in cov}
        if not _STATISTICS.parse(cov.get("stat", "mean")).entry.info["needs_baseline"]:
            recorded.pop("baseline", None)  # provenance names a baseline only where it is used
        provenance[cov["name"]] = {"grid": cov["grid"], **recorded, **dict(stage_prov.get(cov["name"]) or {})}
    return result, grids, provenance


_OPTIONS = ("stat", "window", "spatial", "baseline", "mmm", "time_weights", "min_coverage")


def _open_grid(project: Project, gname: str) -> Any:
    """``[grids.NAME]`` opened, its errors naming the key."""
    import envlink

    spec = project.section("grids")[gname]
    try:
        return envlink.open_grid(resolve_grid_path(project.root, spec["path"]), variable=spec.get("variable"),
                                 **grid_options(spec))
    except (InputError, GridError) as exc:  # a file that opens as no grid is bad input
        raise InputError(f"{where(project, 'grids', gname)} [grids.{gname}]: {exc}") from exc


def _attach_group(project: Project, table: pd.DataFrame, grid: Any, members: list[int], cache: Path | None,
                  progress: bool | None, client: Any = None) -> pd.DataFrame:
    """The covariates ``members`` (positions in the file) of one grid, in one pass over its cells."""
    import envlink

    covs = project.covariates
    specs = []
    climatologies: dict[Path, Any] = {}
    for i in members:
        spec = {"name": covs[i]["name"], **{k: covs[i][k] for k in _OPTIONS if k in covs[i]}}
        if isinstance(spec.get("mmm"), str):  # a climatology grid file
            mmm_path = resolve_path(project.root, spec["mmm"])
            try:
                if mmm_path not in climatologies:
                    climatologies[mmm_path] = envlink.open_grid(mmm_path)
            except (InputError, GridError) as exc:  # as envlink attach --mmm FILE: bad input
                raise InputError(f"{where(project, 'covariates', i)} (covariate {spec['name']!r}): {exc}") from exc
            spec["mmm"] = climatologies[mmm_path]
        specs.append(spec)
    try:
        return envlink.attach_many(table, grid, specs, cache_dir=None if cache is None else str(cache),
                                   progress=progress, client=client)
    except (InputError, GridError) as exc:
        k = getattr(exc, "covariate", 0 if len(members) == 1 else None)
        named = [covs[i]["name"] for i in members]
        if k is not None:
            loc = f"{where(project, 'covariates', members[k])} (covariate {named[k]!r})"
        else:  # reading the grid failed for all of them
            loc = f"{where(project, 'covariates', members[0])} (covariates {', '.join(map(repr, named))})"
        raise type(exc)(f"{loc}: {exc}") from exc


def grid_options(spec: Mapping[str, Any]) -> dict[str, Any]:
    """``open_grid``'s options from a ``[grids.NAME]`` table: band dates, units, calendar.

    TOML ``[start, end]`` pairs become tuples (a band's interval).
    """
    options = {k: spec[k] for k in ("units", "calendar", "band_dates") if k in spec}
    if isinstance(options.get("band_dates"), list):
        options["band_dates"] = [tuple(v) if isinstance(v, list) else v for v in options["band_dates"]]
    return options


def effect_settings(project: Project) -> dict[str, Any]:
    """The [effects] section with the kind and zero-cell rule under their canonical names."""
    eff = project.section("effects")
    if "kind" in eff:
        eff["kind"] = EFFECT_KINDS.parse(eff["kind"]).name
    if "zero_cells" in eff:
        eff["zero_cells"] = ZERO_CELL_RULES.parse(eff["zero_cells"]).name
    return eff


def check_effect_keys(project: Project) -> None:
    """The [effects] options and column roles fit the kind; a message names the key and its line."""
    eff = effect_settings(project)
    if "kind" not in eff:
        return
    kind, columns = eff["kind"], eff.get("columns", {})
    options = [k for k in OPTIONS if k in eff]
    info = EFFECT_KINDS[kind].info
    roles, takes = info["roles"], info["options"]
    for key in options:
        if key not in takes:
            allowed = f"it takes {', '.join(repr(t) for t in takes)}" if takes else "it takes no options"
            raise InputError(f"{where(project, 'effects', key)}: the key 'effects.{key}' does not apply "
                             f"to kind {kind!r}; {allowed}. Remove it.")
    example = ", ".join(f"{r} = '<column>'" for r in roles)
    for role in columns:
        if role not in roles:
            raise InputError(
                f"{where(project, 'effects', 'columns', role)}: [effects.columns] has the role {role!r}, "
                f"which kind {kind!r} does not read.{did_you_mean(role, roles)} Its roles are "
                f"{', '.join(roles)}; e.g. [effects.columns] {example}.")
    lacking = [r for r in roles if r not in columns]
    if lacking:
        raise InputError(
            f"{where(project, 'effects', 'columns')}: [effects.columns] lacks the role(s) "
            f"{', '.join(lacking)} that kind {kind!r} needs; e.g. [effects.columns] {example}.")


def add_effects(project: Project, table: pd.DataFrame, effect: str, variance: str) -> pd.DataFrame:
    """The [effects] step: the table with the effect, variance and flag columns added."""
    import envlink

    eff = effect_settings(project)
    extra = {k: eff[k] for k in OPTIONS if k in eff}
    check_effect_keys(project)  # the messages name keys; effect_sizes's would name its parameters
    try:
        return envlink.effect_sizes(table, eff["kind"], name=effect, variance_name=variance,
                                    **extra, **eff.get("columns", {}))  # fmt: skip
    except (InputError, TypeError) as exc:
        raise InputError(f"{where(project, 'effects', 'columns')}: {exc}") from exc


def render_html(project: Project, table: pd.DataFrame, fit: Any, grids: Mapping[str, Any],
                provenance: Mapping[str, Any], **options: Any) -> str:
    """The report's HTML, drawn over the moderator's grid (or the first grid)."""
    from envlink.report import render_report
    from envlink.report.figures import first_numeric_term

    covs = project.covariates
    moderator = project.section("export").get("moderator")  # None: the report chooses
    drawn = moderator  # the bubble plot's column: first numeric term, formula order
    if drawn is None and fit is not None:
        drawn = first_numeric_term(table, list(fit.terms_))
    field_grid = None
    for cov in covs:
        if cov["name"] == drawn or field_grid is None:
            field_grid = grids[cov["grid"]]
    units = {c: v["units"] for c, v in provenance["covariates"].items() if v.get("units")}
    return render_report(
        table=table, fit=fit, covariates=[c["name"] for c in covs], moderator=moderator,
        field=field_grid, provenance=provenance, windows_tried=max(1, len(covs)),
        title=project.title, label=project.section("studies").get("study"), units=units,
        **options,
    )  # fmt: skip

