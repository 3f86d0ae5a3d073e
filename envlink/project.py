"""The TOML project file: load and validate it, then run the whole pipeline from it.

A project file names the studies table and its columns, the gazetteer, the grids,
the covariates (grid, variable, statistic, window, spatial rule), the effect sizes,
the model and the exports; every key is described in ``docs/project-file.md`` and
checked by :func:`load_project`, whose errors name the key, its line in the file
and the allowed values. :func:`run_project` runs locate -> attach (per covariate,
with an on-disk extraction cache) -> effect sizes -> meta-regression -> export ->
report; :func:`run_demo` runs the bundled invented demo.
"""

from __future__ import annotations

import os
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from envlink._projectfit import fit_model
from envlink._projectload import Project, load_project
from envlink._projectschema import check_files, where
from envlink._projectsteps import (
    Steps,
    add_effects,
    attach_covariates,
    check_writable,
    locate_rows,
    output_targets,
    read_studies,
    render_html,
)
from envlink._util import atomic_path
from envlink.errors import EnvlinkError, InputError

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
    """

    out: Path
    table: pd.DataFrame
    fit: Any
    paths: dict[str, Path]
    fit_rows: int
    windows_tried: int
    seconds: dict[str, float] = field(default_factory=dict)


def run_project(
    project: Project | str | os.PathLike[str],
    *,
    out: str | os.PathLike[str] | None = None,
    force: bool = False,
    progress: bool | None = None,
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
    from envlink.export import export_table

    if not isinstance(project, Project):
        project = load_project(project)
    out_dir = Path(out) if out is not None else project.out
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(
            f"The output folder {str(out_dir)!r} is a file; give a folder (it is created if "
            "missing) with --out DIR or [project] out."
        )
    targets = output_targets(project, out_dir)
    check_files(project, outputs=targets.values())
    existing = [str(p) for p in targets.values() if p.exists()]
    if existing and not force:
        raise InputError(
            f"Output exists and would be overwritten: {', '.join(repr(p) for p in existing)}; "
            "pass --force (force=True) to replace it."
        )
    check_writable(out_dir, "", f"the output folder {str(out_dir)!r}", "Choose another folder with --out DIR.")
    if project.cache_dir is not None:
        check_writable(project.cache_dir, f"{where(project, 'project', 'cache_dir')}: ",
                       f"the cache folder {str(project.cache_dir)!r}",
                       "Choose another [project] cache_dir, or remove the key to cache inside the output "
                       "folder.")  # fmt: skip
    cache = project.cache_dir or out_dir / ".cache"
    covs = project.covariates
    steps = Steps(3 + len(covs) + ("effects" in project.data) + ("model" in project.data)
                  + bool(targets.get("report")), progress)  # fmt: skip
    try:
        table, input_columns = read_studies(project)
        steps.done("read")
        table = locate_rows(project, table, progress)
        steps.done("locate")
        table, grids, attached = attach_covariates(project, table, cache, progress, steps)
        provenance: dict[str, Any] = {"project": {"title": project.title,
                                                  "file": project.source.name if project.source else None},
                                      "locate": project.section("locate"), "covariates": attached}  # fmt: skip
        eff = project.section("effects")
        effect, variance = eff.get("name", "effect"), eff.get("variance", "variance")
        if eff:
            table = add_effects(project, table, effect, variance)
            provenance["effects"] = dict(eff)
            steps.done("effects")
        fit, fit_rows, egger, permutation_p = None, 0, None, None
        if "model" in project.data:
            fit, ok, egger = fit_model(project, table, effect, variance)
            fit_rows = int(ok.sum())
            table = table.assign(fit_included=ok)
            provenance["model"] = dict(project.section("model"))
            n_perm = int(project.section("model").get("permutations", 0))
            if n_perm and fit is not None:
                show = sys.stderr.isatty() if progress is None else bool(progress)
                perm = fit.permutation_test(n_perm, project.section("model").get("seed"),
                                            progress=show)  # fmt: skip
                provenance["model"]["permutation"] = perm.to_dict()
                permutation_p = float(perm.Q_M_p)
            steps.done("model")
        table.attrs = {}
        exp = project.section("export")
        html = None
        if "report" in targets:  # rendered first, so the files land together at the end
            html = render_html(project, table, fit, grids, provenance, effect=effect,
                               variance=variance, egger=egger, permutation_p=permutation_p)
            steps.done("report")
        paths = export_table(
            table, out_dir, formats=exp.get("formats", ["csv", "parquet", "gpkg"]),
            name=exp.get("name", "enriched"), fit=fit, provenance=provenance,
            input_columns=input_columns, project_sha256=project.sha256, title=project.title,
            force=force,
        )  # fmt: skip
        if html is not None:
            with atomic_path(targets["report"]) as tmp:
                tmp.write_text(html, encoding="utf-8")
            paths["report"] = targets["report"]
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
    return RunResult(out=out_dir, table=table, fit=fit, paths=paths, fit_rows=fit_rows,
                     windows_tried=len(covs), seconds=steps.seconds)  # fmt: skip


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
) -> RunResult:
    """Run the bundled invented Vell Archipelago demo (``demo_grids/demo.toml``).

    Works from a plain install: the bundled files are read through
    :mod:`envlink.demo_grids`; if any is missing they are regenerated with the
    seeded generator into a temporary folder first.

    Parameters
    ----------
    out : path-like, default "envlink-demo"
        Output folder (relative to the current directory).
    force : bool, default False
        Replace existing outputs.
    progress : bool, optional
        Show a progress bar on stderr (default: when stderr is a terminal).

    Returns
    -------
    RunResult
    """
    folder, tmp = _demo_project_dir()
    try:
        project = load_project(folder / "demo.toml")
        return run_project(project, out=Path(out).resolve(), force=force, progress=progress)
    finally:
        if tmp is not None:
            tmp.cleanup()
