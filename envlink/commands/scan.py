"""``envlink scan``: fit a family of covariate windows as moderators, with a family-wise p."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from envlink.commands.attach import _HelpFormatter
from envlink.commands.sites import add_locate_arguments
from envlink.errors import EnvlinkError, InputError
from envlink.extract.family import ANCHORS, WindowFamily
from envlink.extract.rules import SPATIAL_RULES
from envlink.extract.statistics import STATISTICS
from envlink.metareg.shuffles import PERMUTATION_SCHEMES
from envlink.metareg.vocabulary import ESTIMATORS, TESTS

__all__ = ["register", "run"]

DESCRIPTION = """\
Scan a family of covariate windows as moderators of a meta-regression. Each window
is SPAN days (--unit D) or whole calendar months (--unit M) ending LAG units before
each row's anchor day (the period's start, end or middle day); every lag x span x
anchor x statistic is one candidate window. The model (--moderators kept in every
window's model, --nested, --method, --test) is fitted once per window, and a
permutation test of the largest statistic over the family gives each window's
family-wise p (Westfall & Young maxT). The text summary goes to stdout; --json,
--windows and --figure write the result, the table of windows and a lag x span
heatmap.

The best window's slope is biased away from zero and its per-window p is too small:
only the family-wise p over all windows tried supports a claim. TABLE holds the
columns of 'envlink sites' (or give its column options to locate first)."""

EPILOG = """\
examples:
  envlink scan located.csv --grid sst_daily.nc --effect es --variance es_var \\
      --lags 0..90:10 --spans 7..84:7 --unit D --stat mean --stat max --nested study \\
      --permutations 1000 --seed 1 --json scan.json --figure scan.png
  envlink scan located.csv --grid sst_monthly.nc --effect es --variance es_var \\
      --lags 0..12 --spans 1..6 --unit M --anchor start --anchor end

--json, --windows and --figure never replace TABLE or the grid, and replace an
existing file only with --force; they are written together, atomically. Each
cell's series is read from the grid once for every window and kept in the
cell-series store (see 'envlink cache'; --no-cache reads without it).

Exit codes: 0 scanned, 2 bad input (too few usable rows for the coefficients, an
output that exists or is an input too), 1 the model cannot be fitted, 128 + N stopped by signal N. Methods and cautions:
docs/inference.md."""


def _names(registry: Any) -> str:
    return ", ".join(e.name for e in registry)


def register(subparsers: Any) -> None:
    """Add the ``scan`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser("scan", help="scan covariate windows as moderators, family-wise p",
                              description=DESCRIPTION, epilog=EPILOG,
                              formatter_class=_HelpFormatter)
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--grid", metavar="FILE", required=True, help="the grid (netCDF, Zarr, GeoTIFF)")
    p.add_argument("--var", metavar="NAME", help="the grid's variable")
    p.add_argument("--effect", metavar="COL", required=True, help="column of the effect sizes")
    p.add_argument("--variance", metavar="COL", required=True, help="column of the variances")
    p.add_argument("--lags", metavar="RANGE", default="0..0",
                   help="lags in units: 'A..B', 'A..B:STEP' or '0,3,6' (default 0..0)")
    p.add_argument("--spans", metavar="RANGE", default="1..1", help="spans in units (default 1..1)")
    p.add_argument("--unit", metavar="D|M", default="D", help="days or whole months (default D)")
    p.add_argument("--anchor", metavar="ANCHOR", action="append", dest="anchors",
                   help=f"anchor day: {_names(ANCHORS)} (repeat for several; default start)")
    p.add_argument("--stat", metavar="STAT", action="append", dest="stats",
                   help=f"window statistic: {STATISTICS.help_text()} (repeat; default mean)")
    p.add_argument("--moderators", metavar="FORMULA", help="moderators kept in every window's model")
    p.add_argument("--nested", metavar="COL", help="study column: effects nested in studies")
    p.add_argument("--method", metavar="METHOD", default="REML",
                   help=f"tau² estimator: REML, ML or DL ({_names(ESTIMATORS)} read; default REML)")
    p.add_argument("--test", metavar="TEST", default="z", help=f"{_names(TESTS)} (default z)")
    p.add_argument("--permutations", metavar="N", type=int, default=1000,
                   help="permutations for the family-wise p (default 1000; 0: none)")
    p.add_argument("--seed", metavar="S", type=int, default=None, help="seed of the permutations")
    p.add_argument("--permute", metavar="SCHEME", default=None,
                   help=f"how rows are permuted: {_names(PERMUTATION_SCHEMES)} (default within "
                        "with --nested, else rows)")
    p.add_argument("--spatial", metavar="RULE", default="nearest",
                   help=f"spatial rule: {SPATIAL_RULES.help_text()} (default nearest)")
    p.add_argument("--baseline", metavar="YYYY-YYYY", help="climatology years (anomaly, dhw-max)")
    p.add_argument("--mmm", metavar="VALUE|FILE", help="dhw-max: maximum monthly mean (degC or file)")
    p.add_argument("--min-coverage", metavar="F", type=float, default=0.5,
                   help="least fraction of a window's days with data (default 0.5)")
    p.add_argument("--json", metavar="OUT", help="write the scan as JSON (.json)")
    p.add_argument("--windows", metavar="OUT", help="write the table of windows (.csv, .parquet...)")
    p.add_argument("--figure", metavar="OUT", help="write the lag x span heatmap (.png or .svg)")
    p.add_argument("--force", action="store_true",
                   help="replace the --json, --windows and --figure files if they exist (never "
                        "TABLE or the grid)")
    p.add_argument("--no-cache", action="store_true",
                   help="read the grid without the cell-series store (see 'envlink cache')")
    p.add_argument("--no-progress", action="store_true",
                   help="hide the progress bars of the windows and permutations (and their lines in a log)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="read the grid's cells on a dask.distributed cluster (e.g. tcp://10.0.0.5:8786), "
                        "once for every window; the fits and permutations run here (docs/scaling.md)")
    add_locate_arguments(p)
    p.set_defaults(handler=run)


def model_table(args: argparse.Namespace) -> Any:
    """TABLE read, located when it is not yet (the locate options), with the model's columns read
    (numbers as float64); shared by ``envlink scan`` and ``envlink impute``."""
    from envlink.commands.attach import _LOCATE_COLUMNS, located_numbers
    from envlink.metareg.frame import read_model_columns
    from envlink.tables import read_table_as_written

    table = read_table_as_written(args.table)
    if not all(c in table.columns for c in _LOCATE_COLUMNS):
        from envlink.commands.sites import locate_kwargs
        from envlink.locate.sites import locate

        if not any(getattr(args, k) for k in ("lat", "coords", "site", "period", "start")):
            raise InputError("The table lacks the located columns (site_lat, site_lon, "
                             "period_start, period_end); run 'envlink sites' first, or give "
                             "its column options to locate here.")
        table = locate(table, progress=False if args.no_progress else None, **locate_kwargs(args))
    else:
        from envlink.commands.sites import note_unused_locate_options

        # impute reads the date options again, to draw the readings of ambiguous dates
        keep = ("period", "start", "end", "order", "plain_season_south", "season_months")
        note_unused_locate_options(args, args.command, keep if args.command == "impute" else ())
    table = located_numbers(table, where=f"Table {str(args.table)!r}")
    return read_model_columns(table, effect=args.effect, variance=args.variance,
                              moderators=args.moderators, nested=args.nested,
                              where={"effect": "--effect", "variance": "--variance",
                                     "moderators": "--moderators"})


def run(args: argparse.Namespace) -> int:
    """Run ``envlink scan``; returns the exit code."""
    from envlink.commands.attach import _inputs, _mmm, _open
    from envlink.core.util import atomic_group
    from envlink.extract.store import cache_root
    from envlink.project.scan import scan
    from envlink.tables import check_output_path

    inputs = _inputs(args)  # never replaced, even with --force
    outs = {key: check_output_path(getattr(args, key), force=args.force, suffixes=suffixes,
                                   inputs=inputs)
            for key, suffixes in (("json", (".json",)), ("figure", (".png", ".svg")),
                                  ("windows", None)) if getattr(args, key)}
    if args.permutations < 0:
        raise InputError(f"--permutations must be 0 or more; got {args.permutations}.")
    # the vocabularies first: a misspelt name is reported before any file is read
    WindowFamily.make(lags=args.lags, spans=args.spans, unit=args.unit,
                      anchors=args.anchors or ["start"], stats=args.stats or ["mean"])
    ESTIMATORS.parse(args.method), TESTS.parse(args.test), SPATIAL_RULES.parse(args.spatial)
    if args.permute:
        PERMUTATION_SCHEMES.parse(args.permute)
    table = model_table(args)
    grid = _open(args.grid, args.var)
    cache_dir = None if args.no_cache else str(cache_root())
    result = scan(table, grid, progress=False if args.no_progress else None, cache_dir=cache_dir,
                  client=args.scheduler, effect=args.effect, variance=args.variance, lags=args.lags,
                  spans=args.spans, unit=args.unit, anchors=args.anchors or ["start"],
                  stats=args.stats or ["mean"], moderators=args.moderators, nested=args.nested,
                  method=args.method, test=args.test, n_permutations=args.permutations,
                  seed=args.seed, scheme=args.permute, spatial=args.spatial,
                  baseline=args.baseline, mmm=_mmm(args.mmm), min_coverage=args.min_coverage)
    print("\n".join(result.lines()))
    try:
        with atomic_group():  # the outputs land together
            _write(result, outs)
    except OSError as exc:
        raise EnvlinkError(f"Cannot write the outputs: {exc.strerror or exc}.") from exc
    for key, path in outs.items():
        print(f"envlink scan: {key} -> {path}", file=sys.stderr)
    return 0


def _write(result: Any, outs: dict[str, Any]) -> None:
    """The --json, --windows and --figure files of a scan."""
    from envlink.core.util import atomic_path
    from envlink.tables import write_table

    if "json" in outs:
        with atomic_path(outs["json"]) as tmp:
            tmp.write_text(json.dumps(result.to_dict(), indent=2, allow_nan=False) + "\n",
                           encoding="utf-8")
    if "windows" in outs:
        write_table(result.table.rename_axis("window").reset_index(), outs["windows"], force=True)
    if "figure" in outs:
        from envlink.report.scanplots import save_scan_figure

        save_scan_figure(result, outs["figure"])


#: Python parameter -> option of ``envlink scan``, for messages (envlink.commands.options).
PARAM_OPTIONS = {
    "effect": "--effect", "variance": "--variance", "moderators": "--moderators",
    "nested": "--nested", "method": "--method", "test": "--test", "lags": "--lags",
    "spans": "--spans", "unit": "--unit", "anchors": "--anchor", "stats": "--stat",
    "stat": "--stat", "anchor": "--anchor",
    "n_permutations": "--permutations", "seed": "--seed", "scheme": "--permute",
    "spatial": "--spatial", "baseline": "--baseline", "mmm": "--mmm",
    "min_coverage": "--min-coverage", "variable": "--var", "force": "--force",
    "progress": {False: "--no-progress"}, "client": "--scheduler",
}
