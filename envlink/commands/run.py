"""``envlink run``: the whole pipeline (locate, attach, effects, model, export, report) from a project file."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Mapping
from typing import Any

__all__ = ["register", "run", "PARAM_OPTIONS", "summary_lines", "report_result"]

DESCRIPTION = """\
Run the whole pipeline described by a TOML project file: locate the studies'
sites and periods, attach every covariate from its grid (the covariates of a grid
from one read of its cells, kept in the cell-series store for later runs; see
'envlink cache'), compute effect sizes, fit the meta-regression, and write the
enriched table (CSV with datapackage.json, Parquet, GeoPackage), the fit (JSON and
text) and the HTML report into the output folder. Every key of the project file is
described in docs/project-file.md."""

EPILOG = """\
example:
  envlink run vell.toml --out results/

An existing output is not replaced unless --force is given; an interrupted run
leaves any previous output as it was. Exit codes: 0 done, 2 bad project file or
input (the message names the key and its line; too few usable rows to fit the model
is bad input), 1 the run failed."""


def register(subparsers: Any) -> None:
    """Add the ``run`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "run", help="run the whole pipeline from a TOML project file",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )  # fmt: skip
    p.add_argument("project", metavar="PROJECT.toml", help="the project file")
    p.add_argument("--out", metavar="DIR",
                   help="output folder (default: the project file's [project] out, "
                        "relative to the file)")  # fmt: skip
    p.add_argument("--force", action="store_true", help="replace existing outputs")
    p.add_argument("--no-progress", action="store_true", help="hide the progress bar")
    p.add_argument("--impute-dates", metavar="M", type=int, default=None,
                   help="draw M plausible windows for imprecise dates and pool the fits by "
                        "Rubin's rules (sets [imputation] draws; docs/inference.md)")
    p.add_argument("--no-cache", action="store_true",
                   help="read every grid without the cell-series store (see 'envlink cache')")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="read the grids' cells on a dask.distributed cluster (sets [project] "
                        "scheduler; docs/scaling.md)")
    p.set_defaults(handler=run)


#: Python parameter of ``run_project`` -> option, for messages (envlink.commands.options).
PARAM_OPTIONS = {"out": "--out", "force": "--force", "progress": {False: "--no-progress"},
                 "draws": "--impute-dates", "cache": {False: "--no-cache"}, "scheduler": "--scheduler"}


def report_result(result: Any) -> None:
    """Summary to stderr, written paths to stdout (shared with ``envlink demo``)."""
    for line in summary_lines(result):
        print(line, file=sys.stderr)
    for path in result.paths.values():
        print(path)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink run`` and return its exit code."""
    from envlink.errors import InputError
    from envlink.project import load_project, run_project

    project = load_project(args.project)
    if args.impute_dates is not None:
        if args.impute_dates < 2 or "model" not in project.data:
            raise InputError("--impute-dates needs a whole number >= 2 and a project with a "
                             "[model] section.")
        project.data["imputation"] = {**project.section("imputation"), "draws": args.impute_dates}
    result = run_project(project, out=args.out, force=args.force,
                         progress=False if args.no_progress else None, cache=not args.no_cache,
                         scheduler=getattr(args, "scheduler", None))  # fmt: skip
    report_result(result)
    return 0


def summary_lines(result: Any) -> list[str]:
    """Plain-words summary of a run, for the command line."""
    t = result.table
    lines = [f"{len(t)} rows read"]
    if "locate_status" in t:
        counts = t["locate_status"].astype(str).value_counts()
        lines.append("located: " + ", ".join(f"{counts.get(k, 0)} {k}"
                                             for k in ("ok", "flagged", "rejected")))  # fmt: skip
    if result.fit is not None:
        d: Mapping[str, Any] = result.fit.to_dict()
        lines.append(f"model: {d['model']['effects_used']} effects, tau² by "
                     f"{d['model']['tau2_method']}, {d['coefficients']['test_words']}")
        for c in d["coefficients"]["table"]:
            lines.append(f"  {c['term']}: {c['estimate']:.4g} "
                         f"[{c['ci_low']:.4g}, {c['ci_high']:.4g}], p = {c['p']:.3g}")  # fmt: skip
    lines.append(f"{result.windows_tried} covariate window(s) tried")
    return lines
