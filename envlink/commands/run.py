"""``envlink run``: the whole pipeline (locate, attach, effects, model, export, report) from a project file."""

from __future__ import annotations

import argparse
import sys
from typing import Any

__all__ = ["register", "run"]

DESCRIPTION = """\
Run the whole pipeline described by a TOML project file: locate the studies'
sites and periods, attach every covariate from its grid (reusing the extraction
cache on reruns), compute effect sizes, fit the meta-regression, and write the
enriched table (CSV with datapackage.json, Parquet, GeoPackage), the fit (JSON and
text) and the HTML report into the output folder. Every key of the project file is
described in docs/project-file.md."""

EPILOG = """\
example:
  envlink run vell.toml --out results/

An existing output is not replaced unless --force is given; an interrupted run
leaves any previous output as it was. Exit codes: 0 done, 2 bad project file or
input (the message names the key and its line), 1 the run failed."""


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
    p.set_defaults(handler=run)


def report_result(result: Any) -> None:
    """Summary to stderr, written paths to stdout (shared with ``envlink demo``)."""
    from envlink.project import _summary_lines

    for line in _summary_lines(result):
        print(line, file=sys.stderr)
    for path in result.paths.values():
        print(path)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink run`` and return its exit code."""
    from envlink.project import run_project

    result = run_project(args.project, out=args.out, force=args.force,
                         progress=False if args.no_progress else None)  # fmt: skip
    report_result(result)
    return 0
