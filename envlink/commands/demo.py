"""``envlink demo``: the whole pipeline on the bundled invented Vell Archipelago scenario."""

from __future__ import annotations

import argparse
from typing import Any

__all__ = ["register", "run"]

DESCRIPTION = """\
Run the whole pipeline on the bundled invented scenario (the fictional Vell
Archipelago: invented reef surveys of lesion prevalence, invented SST and air
temperature grids). Writes the enriched table (CSV with datapackage.json, Parquet,
GeoPackage), the fit (fit.json, fit.txt) and report.html into the output folder.
The generator planted a slope of 0.9 per degree C of SST anomaly; the fit should
recover it. Works from a plain install: missing demo files are regenerated from
the seeded generator."""

EPILOG = """\
example:
  envlink demo --out envlink-demo
  then open envlink-demo/report.html

Exit codes: 0 done, 2 bad usage (e.g. outputs exist without --force), 1 the run failed."""


def register(subparsers: Any) -> None:
    """Add the ``demo`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "demo", help="run the whole pipeline on the bundled invented demo",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )  # fmt: skip
    p.add_argument("--out", metavar="DIR", default="envlink-demo",
                   help="output folder (default: envlink-demo in the current folder)")  # fmt: skip
    p.add_argument("--force", action="store_true", help="replace existing outputs")
    p.add_argument("--no-progress", action="store_true", help="hide the progress bar")
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink demo`` and return its exit code."""
    from envlink.commands.run import report_result
    from envlink.project import run_demo

    result = run_demo(args.out, force=args.force, progress=False if args.no_progress else None)
    report_result(result)
    return 0
