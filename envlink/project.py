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
import time
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from envlink._projectfit import fit_model
from envlink._projectschema import check_columns, check_files, formula_columns, validate, where
from envlink._util import atomic_path
from envlink.errors import EnvlinkError, GridError, InputError

__all__ = ["Project", "RunResult", "load_project", "run_project", "run_demo"]


@dataclass(frozen=True)
class Project:
    """A validated project file. Paths are absolute (resolved against the file's folder).

    Attributes
    ----------
    source : pathlib.Path or None
        The file read (None for a project given as text).
    text, sha256 : str
        The file's text and the SHA-256 of its bytes (recorded in provenance).
    data : dict
        The parsed, validated TOML.
    title, out, cache_dir, studies, gazetteer
        Resolved settings (``cache_dir`` None means ``out / ".cache"``).
    """

    source: Path | None
    text: str
    sha256: str
    data: dict[str, Any]
    root: Path
    title: str
    out: Path
    cache_dir: Path | None
    studies: Path
    gazetteer: Path | None

    def section(self, name: str) -> dict[str, Any]:
        """The section ``name`` (an empty dict when absent)."""
        value = self.data.get(name, {})
        return dict(value) if isinstance(value, dict) else value

    @property
    def covariates(self) -> list[dict[str, Any]]:
        """The ``[[covariates]]`` tables, in file order."""
        return [dict(c) for c in self.data.get("covariates", [])]


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


def load_project(path: str | os.PathLike[str]) -> Project:
    """Read and validate a TOML project file.

    Parameters
    ----------
    path : path-like
        The project file. Relative paths inside it are relative to its folder.

    Returns
    -------
    Project

    Raises
    ------
    InputError
        Unreadable file, TOML syntax error (with its line), an unknown section or key,
        a bad value, or a missing required key; the message names the key, its line
        and what is allowed.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "p.toml"
    >>> _ = p.write_text('[studies]\\npath = "t.csv"\\n[model]\\nmethod = "REMl"\\n')
    >>> load_project(p)
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: ...p.toml, line 4: the key 'model.method' must be one of 'REML', 'ML', 'DL', 'PM', 'HE', 'SJ'; got 'REMl'.
    """
    from envlink.export import file_sha256

    p = Path(path)
    if p.is_dir():
        found = sorted(q.name for q in p.glob("*.toml"))[:5]
        raise InputError(
            f"Cannot read project file {str(p)!r}: it is a folder; give the project's .toml file"
            + (f" (the folder holds {', '.join(found)})." if found else ".")
        )
    if not p.is_file():
        raise InputError(f"Cannot read project file {str(p)!r}: no such file.")
    raw = p.read_bytes()
    try:
        text = raw.decode("utf-8")
        data = tomllib.loads(text)
    except UnicodeDecodeError as exc:
        raise InputError(f"Cannot read project file {str(p)!r}: not UTF-8 text ({exc}).") from exc
    except tomllib.TOMLDecodeError as exc:
        hint = ""
        if p.suffix.lower() in (".csv", ".tsv", ".txt", ".xlsx", ".parquet", ".nc"):
            hint = (" envlink run takes a TOML project file (see docs/project-file.md); "
                    "a table goes in its [studies] path.")
        raise InputError(f"{p}: not valid TOML: {exc}.{hint}") from exc
    validate(data, text, str(p))
    root = p.resolve().parent
    proj = data.get("project", {})
    loc = data.get("locate", {})

    def resolve(value: str) -> Path:
        q = Path(os.path.expanduser(value))
        return q if q.is_absolute() else root / q

    return Project(
        source=p, text=text, sha256=file_sha256(p), data=data, root=root,
        title=proj.get("title", "envlink report"), out=resolve(proj.get("out", "envlink-out")),
        cache_dir=resolve(proj["cache_dir"]) if "cache_dir" in proj else None,
        studies=resolve(data["studies"]["path"]),
        gazetteer=resolve(loc["gazetteer"]) if "gazetteer" in loc else None,
    )  # fmt: skip


def _targets(project: Project, out: Path) -> dict[str, Path]:
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


class _Steps:
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


def _writable_folder(folder: Path, where_: str, what: str, advice: str) -> None:
    """Create ``folder`` if needed and check a file can be made in it, before any work."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{where_}Cannot create {what}: {exc.strerror or exc}. {advice}") from exc
    try:
        fd, probe = tempfile.mkstemp(prefix=".envlink-write-check-", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise InputError(f"{where_}Cannot write in {what}: {exc.strerror or exc}. {advice}") from exc


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
    import envlink
    from envlink.export import FORMATS, check_columns_exportable, export_table
    from envlink.tables import read_table_as_written

    if not isinstance(project, Project):
        project = load_project(project)
    out_dir = Path(out) if out is not None else project.out
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(
            f"The output folder {str(out_dir)!r} is a file; give a folder (it is created if "
            "missing) with --out DIR or [project] out."
        )
    targets = _targets(project, out_dir)
    check_files(project, outputs=targets.values())
    existing = [str(p) for p in targets.values() if p.exists()]
    if existing and not force:
        raise InputError(
            f"Output exists and would be overwritten: {', '.join(repr(p) for p in existing)}; "
            "pass --force (force=True) to replace it."
        )
    _writable_folder(out_dir, "", f"the output folder {str(out_dir)!r}", "Choose another folder with --out DIR.")
    if project.cache_dir is not None:
        _writable_folder(project.cache_dir, f"{where(project, 'project', 'cache_dir')}: ",
                         f"the cache folder {str(project.cache_dir)!r}",
                         "Choose another [project] cache_dir, or remove the key to cache inside the output "
                         "folder.")  # fmt: skip
    cache = project.cache_dir or out_dir / ".cache"
    covs = project.covariates
    steps = _Steps(3 + len(covs) + ("effects" in project.data) + ("model" in project.data)
                   + bool(targets.get("report")), progress)  # fmt: skip
    try:
        table = read_table_as_written(project.studies)
        input_columns = [str(c) for c in table.columns]
        check_columns(project, table)
        try:
            check_columns_exportable(input_columns, project.section("export").get("formats", FORMATS))
        except InputError as exc:
            raise InputError(f"{where(project, 'export')}: {exc}") from exc
        steps.done("read")
        loc = project.section("locate")
        if not any(loc.get(k) for k in ("lat", "coords", "site", "period", "start")):
            raise InputError(
                f"{where(project, 'locate')}: the [locate] section must name the studies "
                "table's columns to read: lat and lon, coords, site (with gazetteer), and "
                'period or start and end; e.g. [locate] lat = "latitude", lon = "longitude", '
                'period = "sampled".'
            )
        from envlink.locate.sites import locate as locate_stage

        kwargs = {k: v for k, v in loc.items() if k != "gazetteer"}
        gazetteer = envlink.read_gazetteer(project.gazetteer) if project.gazetteer else None
        try:
            table = locate_stage(table, gazetteer=gazetteer, progress=progress, **kwargs)
        except InputError as exc:
            raise InputError(f"{where(project, 'locate')} [locate]: {exc}") from exc
        steps.done("locate")
        provenance: dict[str, Any] = {"project": {"title": project.title,
                                                  "file": project.source.name if project.source else None},
                                      "locate": dict(loc), "covariates": {}}  # fmt: skip
        grids: dict[str, Any] = {}
        for i, cov in enumerate(covs):
            gname = cov["grid"]
            if gname not in grids:
                spec = project.section("grids")[gname]
                try:
                    grids[gname] = envlink.open_grid(_resolve(project, spec["path"]),
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
                    options["mmm"] = envlink.open_grid(_resolve(project, options["mmm"]))
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
            provenance["covariates"][cov["name"]] = {"grid": gname, **recorded, **stage_prov}
            steps.done(f"attach {cov['name']}")
        eff = project.section("effects")
        effect, variance = eff.get("name", "effect"), eff.get("variance", "variance")
        if eff:
            extra = {k: eff[k] for k in ("correction", "zero_cells", "exact", "bias_correction")
                     if k in eff}  # fmt: skip
            try:
                table = envlink.effect_sizes(table, eff["kind"], name=effect, variance_name=variance,
                                             **extra, **eff.get("columns", {}))  # fmt: skip
            except (InputError, TypeError) as exc:
                raise InputError(f"{where(project, 'effects', 'columns')}: {exc}") from exc
            provenance["effects"] = {k: v for k, v in eff.items()}
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
            html = _render_report(project, table, fit, grids, provenance, effect=effect,
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


def _render_report(project: Project, table: pd.DataFrame, fit: Any, grids: Mapping[str, Any],
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


def _resolve(project: Project, value: str) -> Path:
    path = Path(os.path.expanduser(value))
    return path if path.is_absolute() else project.root / path


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
