"""run_project and run_demo: the whole pipeline from a TOML project file, step by step.

A project file names the studies table and its columns, the gazetteer, the grids,
the covariates (grid, variable, statistic, window, spatial rule), the effect sizes,
the model and the exports; every key is described in ``docs/project-file.md`` and
checked by :func:`load_project`, whose errors name the key, its line in the file
and the allowed values. :func:`run_project` checks its outputs first, then runs
locate -> attach (the covariates of each grid together, each needed cell's series read
once and kept in the cell-series store of the user's cache folder) -> effect sizes ->
meta-regression -> report -> export, each a named step (:mod:`envlink.project.steps`);
:func:`run_demo` runs the bundled invented demo.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import pandas as pd

from envlink.core.progress import wants_progress
from envlink.core.util import atomic_group, atomic_path
from envlink.errors import EnvlinkError
from envlink.export.formats import DEFAULT_FORMATS
from envlink.project.fit import fit_model
from envlink.project.inference import FitWithChecks, run_checks
from envlink.project.load import Project, load_project
from envlink.project.schema import where
from envlink.project.steps import (
    Steps,
    add_effects,
    attach_covariates,
    effect_settings,
    locate_rows,
    prepare_outputs,
    read_studies,
    render_html,
)

__all__ = ["Project", "RunResult", "load_project", "run_project", "run_demo"]


@dataclass
class RunResult:
    """What :func:`run_project` produced.

    Attributes
    ----------
    out : pathlib.Path
        The output folder.
    table : pandas.DataFrame
        The enriched table (every input row and column, then the added columns).
    fit : object or None
        The fitted meta-regression.
    paths : dict of str to pathlib.Path
        Files written (``csv``, ``datapackage``, ``parquet``, ``gpkg``, ``fit_json``,
        ``fit_text``, ``report``).
    fit_rows : int
        Rows that entered the model.
    windows_tried : int
        Covariates (window and statistic choices) computed.
    seconds : dict of str to float
        Wall time of each step.
    notes : list of str
        Plain-words notes on the run (e.g. a format the demo left out for want of a library).
    """

    out: Path
    table: pd.DataFrame
    fit: Any
    paths: dict[str, Path]
    fit_rows: int
    windows_tried: int
    seconds: dict[str, float] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def run_project(
    project: Project | str | os.PathLike[str],
    *,
    out: str | os.PathLike[str] | None = None,
    force: bool = False,
    progress: bool | None = None,
    cache: bool = True,
    scheduler: Any = None,
) -> RunResult:
    """Run the whole pipeline described by a project file.

    Parameters
    ----------
    project : Project or path-like
        A project from :func:`load_project`, or the file's path.
    out : path-like, optional
        Output folder; default the file's ``[project] out`` (relative to the file).
    force : bool, default False
        Replace existing outputs. Without it, an existing output is an
        :class:`InputError` raised before any work is done.
    progress : bool, optional
        Show a progress bar on stderr (default: when stderr is a terminal).
    cache : bool, default True
        Keep and reuse the cells' series in the cell-series store: ``[project]
        cache_dir``, else ``$ENVLINK_CACHE``, else the user's cache folder (never the
        output folder; see docs/store.md). False reads every grid without it.
    scheduler : dask.distributed.Client or str, optional
        Read the grids' cells on this Dask cluster (a client or a scheduler's
        address; default the file's ``[project] scheduler``, else this machine):
        as ``client=`` of :func:`envlink.attach` (docs/scaling.md).

    Returns
    -------
    RunResult

    Raises
    ------
    InputError
        A bad project file, a missing column or file (the key and line are named),
        or existing outputs without ``force``.
    EnvlinkError
        A stage failed (grid, model).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "t.csv").write_text("lat,lon,when\\n-9.5,-117.2,March 2008\\n")
    >>> _ = (d / "p.toml").write_text(
    ...     '[studies]\\npath = "t.csv"\\n[locate]\\nlat = "lat"\\nlon = "lon"\\n'
    ...     'period = "when"\\n[export]\\nformats = ["csv"]\\nreport = false\\n')
    >>> r = run_project(d / "p.toml", out=d / "out", progress=False)
    >>> r.table[["site_lat", "period_start"]].values.tolist()
    [[-9.5, '2008-03-01']]
    """
    if not isinstance(project, Project):
        project = load_project(project)
    out_dir = Path(out) if out is not None else project.out
    targets = prepare_outputs(project, out_dir, force)
    client = _connect(project, scheduler)
    steps = Steps(_step_count(project, targets), progress)
    try:
        table, input_columns = read_studies(project)
        steps.done("read")
        table = locate_rows(project, table, progress)
        steps.done("locate")
        folder = _cache_folder(project, cache)
        table, grids, attached = attach_covariates(project, table, folder, progress, steps, client)
        provenance: dict[str, Any] = {"project": {"title": project.title,
                                                  "file": project.source.name if project.source else None},
                                      "locate": project.section("locate"), "covariates": attached}  # fmt: skip
        table = _effects_step(project, table, provenance, steps)
        table, model = _model_step(project, table, provenance, progress, steps, grids,
                                   _Reads(None if folder is None else str(folder), client))
        table.attrs = {}
        html = None
        if "report" in targets:  # rendered first, so the files land together at the end
            html = render_html(project, table, model.fit, grids, provenance, effect=model.effect,
                               variance=model.variance, egger=model.egger,
                               inference=model.checks)  # fmt: skip
            steps.done("report")
        fit_out = FitWithChecks(model.fit, model.checks) if model.checks is not None else model.fit
        with atomic_group():  # the table files, the fit and the report land together
            paths = _write_outputs(project, table, fit_out, provenance, input_columns, out_dir,
                                   targets, html, force)  # fmt: skip
        steps.done("export")
    except OSError as exc:
        if isinstance(exc, EnvlinkError):
            raise
        where_ = f" ({exc.filename})" if exc.filename else ""
        raise EnvlinkError(
            f"Cannot write the outputs in {str(out_dir)!r}: {exc.strerror or exc}{where_}; "
            "no partial output file was left."
        ) from exc
    finally:
        steps.close()
        if client is not None and client is not scheduler:
            client.close()
    return RunResult(out=out_dir, table=table, fit=model.fit, paths=paths, fit_rows=model.rows,
                     windows_tried=len(project.covariates) + _scanned(model), seconds=steps.seconds)  # fmt: skip


def _connect(project: Project, scheduler: Any) -> Any:
    """The Dask client the grids' cells are read with (``scheduler``, else ``[project]
    scheduler``), or None; a scheduler that does not answer is bad input naming the key."""
    address = scheduler if scheduler is not None else project.section("project").get("scheduler")
    if address is None:
        return None
    from envlink.core.cluster import connect
    from envlink.errors import InputError

    try:
        return connect(address)
    except InputError as exc:
        if scheduler is not None:
            exc.param = "scheduler"
            raise
        raise InputError(f"{where(project, 'project', 'scheduler')}: {exc}") from None


def _cache_folder(project: Project, cache: bool) -> Path | None:
    """envlink's cache folder for this run: ``[project] cache_dir``, else the user's; None without."""
    if not cache:
        return None
    from envlink.extract.store import cache_root

    return project.cache_dir if project.cache_dir is not None else cache_root()


def _step_count(project: Project, targets: Mapping[str, Path]) -> int:
    """Steps of the progress bar: read, locate, each covariate, effects, model, report, export."""
    return (3 + len(project.covariates) + ("effects" in project.data) + ("model" in project.data)
            + bool(targets.get("report")))  # fmt: skip


def _effects_step(project: Project, table: pd.DataFrame, provenance: dict[str, Any], steps: Steps
                  ) -> pd.DataFrame:
    """The [effects] step when the project has one; its settings go into ``provenance``."""
    if not project.section("effects"):
        return table
    effect, variance = _effect_columns(project)
    table = add_effects(project, table, effect, variance)
    provenance["effects"] = effect_settings(project)
    steps.done("effects")
    return table


def _effect_columns(project: Project) -> tuple[str, str]:
    eff = project.section("effects")
    return eff.get("name", "effect"), eff.get("variance", "variance")


@dataclass
class _Model:
    """What the model step gives the report and the result."""

    effect: str
    variance: str
    fit: Any = None
    rows: int = 0
    egger: Any = None
    checks: Any = None


@dataclass
class _Reads:
    """How the checks after the fit read grid cells: the store's folder, the cluster's client."""

    cache_dir: str | None = None
    client: Any = None


def _model_step(project: Project, table: pd.DataFrame, provenance: dict[str, Any],
                progress: bool | None, steps: Steps, grids: dict[str, Any],
                reads: _Reads) -> tuple[pd.DataFrame, _Model]:
    """The [model] step when the project has one: the fit, ``fit_included``, then the checks
    (permutation, [scan], [imputation], [checks]: :mod:`envlink.project.inference`)."""
    model = _Model(*_effect_columns(project))
    if "model" not in project.data:
        return table, model
    settings = project.section("model")
    model.fit, ok, model.egger = fit_model(project, table, model.effect, model.variance)
    model.rows = int(ok.sum())
    table = table.assign(fit_included=ok)
    provenance["model"] = dict(settings)
    table, model.checks = run_checks(project, table, model.fit, grids, effect=model.effect,
                                     variance=model.variance, progress=wants_progress(progress),
                                     cache_dir=reads.cache_dir, client=reads.client)
    if model.checks.permutation is not None:
        provenance["model"]["permutation"] = model.checks.permutation.to_dict()
    steps.done("model")
    return table, model


def _scanned(model: _Model) -> int:
    """Windows the scan tried (0 without a scan)."""
    scan = getattr(model.checks, "scan", None)
    return int(scan.n_windows) if scan is not None else 0


def _write_outputs(project: Project, table: pd.DataFrame, fit: Any, provenance: dict[str, Any],
                   input_columns: list[str], out_dir: Path, targets: Mapping[str, Path],
                   html: str | None, force: bool) -> dict[str, Path]:
    """The [export] step: the table files (and the fit), then the report, each written atomically."""
    from envlink.export import export_table

    exp = project.section("export")
    paths = export_table(
        table, out_dir, formats=exp.get("formats", DEFAULT_FORMATS), name=exp.get("name", "enriched"),
        fit=fit, provenance=provenance, input_columns=input_columns, project_sha256=project.sha256,
        title=project.title, force=force,
    )  # fmt: skip
    if html is not None:
        with atomic_path(targets["report"]) as tmp:
            tmp.write_text(html, encoding="utf-8")
        paths["report"] = targets["report"]
    return paths


def _demo_project_dir() -> tuple[Path, tempfile.TemporaryDirectory[str] | None]:
    """The bundled demo folder, or a fresh regeneration of it when files are missing."""
    from envlink.demo_grids import DEMO_FILES, data_path

    bundled = data_path("demo.toml").parent
    if all(data_path(n).is_file() for n in DEMO_FILES):
        return bundled, None
    from envlink.demo_grids.generate import generate

    tmp = tempfile.TemporaryDirectory(prefix="envlink-demo-data-")
    generate(tmp.name)
    return Path(tmp.name), tmp


def run_demo(
    out: str | os.PathLike[str] = "envlink-demo",
    *,
    force: bool = False,
    progress: bool | None = None,
    cache: bool = True,
) -> RunResult:
    """Run the bundled invented Vell Archipelago demo (``demo_grids/demo.toml``).

    Works from a plain install: the bundled files are read through
    :mod:`envlink.demo_grids`; if any is missing they are regenerated with the
    seeded generator into a temporary folder first. Without pyarrow (an optional
    extra) the Parquet table is left out, with a note in ``RunResult.notes``. The
    cell-series store is in the user's cache folder (``$ENVLINK_CACHE``, default
    ``~/.cache/envlink``; a temporary folder where that one cannot be written), never
    the output folder.

    Parameters
    ----------
    out : path-like, default "envlink-demo"
        Output folder (relative to the current directory).
    force : bool, default False
        Replace existing outputs.
    progress : bool, optional
        Show a progress bar on stderr (default: when stderr is a terminal).
    cache : bool, default True
        Use the cell-series store in the user's cache folder (never in ``out``).

    Returns
    -------
    RunResult
    """
    folder, tmp = _demo_project_dir()
    cache_dir, tmp_cache = _demo_cache() if cache else (None, None)
    try:
        project = load_project(folder / "demo.toml")
        project, notes = _demo_settings(project, cache_dir)
        result = run_project(project, out=Path(out).resolve(), force=force, progress=progress, cache=cache)
        result.notes.extend(notes)
        return result
    finally:
        for t in (tmp, tmp_cache):
            if t is not None:
                t.cleanup()


def _demo_cache() -> tuple[Path, tempfile.TemporaryDirectory[str] | None]:
    """The demo's cache folder (its cell-series store): the user's (``$ENVLINK_CACHE``), outside
    the output folder; a temporary folder where that one cannot be written."""
    from envlink.core.util import probe_writable
    from envlink.extract.store import cache_root

    folder = cache_root()
    try:
        folder.mkdir(parents=True, exist_ok=True)
        probe_writable(folder)
        return folder, None
    except OSError:
        tmp = tempfile.TemporaryDirectory(prefix="envlink-demo-cache-")
        return Path(tmp.name), tmp


def _demo_settings(project: Project, cache: Path | None) -> tuple[Project, list[str]]:
    """The demo project with its cache folder, and without Parquet where pyarrow is missing
    (a plain install has no pyarrow): the run says so in a note."""
    notes: list[str] = []
    export = project.section("export")
    formats = list(export.get("formats", DEFAULT_FORMATS))
    try:
        import pyarrow  # noqa: F401 - only whether it can be imported
    except ImportError:
        if "parquet" in formats:
            formats.remove("parquet")
            notes.append("the Parquet table was not written: it needs pyarrow, which is not installed "
                         "(pip install 'envlink[export]' adds it)")
    data = {**project.data, "export": {**export, "formats": formats}}
    return replace(project, data=data, cache_dir=cache), notes
