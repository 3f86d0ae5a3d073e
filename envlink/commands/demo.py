"""``envlink demo``: the whole pipeline on the bundled invented Vell Archipelago scenario."""

from __future__ import annotations

import argparse
import sys
from typing import Any

__all__ = ["register", "run", "PARAM_OPTIONS"]

DESCRIPTION = """\
Run the whole pipeline on the bundled invented scenario (the fictional Vell
Archipelago: invented reef surveys of lesion prevalence, invented SST and air
temperature grids). Writes the enriched table (CSV with datapackage.json, Parquet,
GeoPackage), the fit (fit.json, fit.txt) and report.html into the output folder.
The generator planted a slope of 0.9 per degree C of SST anomaly; the fit should
recover it. Works from a plain install: missing demo files are regenerated from
the seeded generator, and without pyarrow (pip install 'envlink[export]') the
Parquet table is left out with a note. The cells read from the grids are kept in
the cell-series store in $ENVLINK_CACHE (default ~/.cache/envlink; see 'envlink
cache'), not in the output folder."""

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
    p.add_argument("--no-cache", action="store_true",
                   help="read every grid without the cell-series store (see 'envlink cache')")
    p.set_defaults(handler=run)


#: Python parameter of ``run_demo`` -> option, for messages (envlink.commands.options).
PARAM_OPTIONS = {"out": "--out", "force": "--force", "progress": {False: "--no-progress"},
                 "cache": {False: "--no-cache"}}


def run(args: argparse.Namespace) -> int:
    """Run ``envlink demo`` and return its exit code."""
    from envlink.commands.run import report_result
    from envlink.project import run_demo

    result = run_demo(args.out, force=args.force, progress=False if args.no_progress else None,
                      cache=not args.no_cache)
    report_result(result)
    for note in result.notes:
        print(f"note: {note}", file=sys.stderr)
    return 0
