"""``envlink impute``: carry imprecise sampling dates into the fit by multiple imputation."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from envlink.commands.attach import _HelpFormatter
from envlink.commands.sites import add_locate_arguments
from envlink.errors import EnvlinkError, InputError
from envlink.extract.rules import SPATIAL_RULES
from envlink.extract.statistics import STATISTICS
from envlink.metareg.vocabulary import ESTIMATORS, TESTS

__all__ = ["register", "run"]

DESCRIPTION = """\
Fit the model over M plausible sampling windows and pool the fits by Rubin's rules.
In each draw, every row with imprecise dates takes one plausible window: a month,
season or year with a stated sampling effort (--effort COL, days) becomes a window of
that many days placed at random inside it, and an ambiguous day/month order or season
takes each reading with equal chance; other rows keep their period (docs/inference.md).
The covariates (--covariate NAME=STAT[@WINDOW], repeated, as for 'envlink attach') are
attached over each draw's windows, the model (--moderators, --nested, --method,
--test) is fitted to each completed table, and the fits are pooled with Barnard-Rubin
degrees of freedom. The summary (pooled coefficients, and how much each SE grows
because of the dates) goes to stdout; --json writes the whole result. Each grid cell
is read once for every draw, through the cell-series store. TABLE holds the columns
of 'envlink sites' (or give its column options to locate first); --period (or
--start and --end) names the original date column(s), so ambiguous rows are read
both ways."""

EPILOG = """\
examples:
  envlink impute located.csv --grid sst_monthly.nc --covariate sst_anom=anomaly \\
      --baseline 1991-2020 --effect es --variance es_var --moderators sst_anom \\
      --nested study --period sampling_period --effort effort_days \\
      --draws 20 --seed 1 --json imputed.json

--json never replaces TABLE or the grid, and replaces an existing file only with
--force. The pooled p-values are corrected for the imprecise dates (the between-draw
variance), not for windows tried elsewhere.

Exit codes: 0 pooled, 2 bad input (an output that exists or is an input too), 1 the
model cannot be fitted, 128 + N stopped by signal N. Methods and cautions:
docs/inference.md."""


def register(subparsers: Any) -> None:
    """Add the ``impute`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser("impute", help="pool fits over plausible dates (Rubin's rules)",
                              description=DESCRIPTION, epilog=EPILOG, formatter_class=_HelpFormatter)
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--grid", metavar="FILE", required=True, help="the grid (netCDF, Zarr, GeoTIFF)")
    p.add_argument("--var", metavar="NAME", help="the grid's variable")
    p.add_argument("--covariate", metavar="NAME=STAT[@WINDOW]", action="append", required=True,
                   help=f"a covariate to attach in every draw (repeat); STAT: {STATISTICS.help_text()}")
    p.add_argument("--effect", metavar="COL", required=True, help="column of the effect sizes")
    p.add_argument("--variance", metavar="COL", required=True, help="column of the variances")
    p.add_argument("--moderators", metavar="FORMULA", help="the model's moderators (covariates by name)")
    p.add_argument("--nested", metavar="COL", help="study column: effects nested in studies")
    p.add_argument("--method", metavar="METHOD", default="REML",
                   help=f"tau² estimator ({', '.join(e.name for e in ESTIMATORS)}; default REML)")
    p.add_argument("--test", metavar="TEST", default="z",
                   help=f"{', '.join(e.name for e in TESTS)} (default z)")
    p.add_argument("--draws", metavar="M", type=int, default=20, help="plausible tables (default 20)")
    p.add_argument("--seed", metavar="S", type=int, default=None, help="seed of the draws")
    p.add_argument("--effort", metavar="COL", help="column of sampling effort in days")
    p.add_argument("--spatial", metavar="RULE", default="nearest",
                   help=f"spatial rule: {SPATIAL_RULES.help_text()} (default nearest)")
    p.add_argument("--baseline", metavar="YYYY-YYYY", help="climatology years (anomaly, dhw-max)")
    p.add_argument("--mmm", metavar="VALUE|FILE", help="dhw-max: maximum monthly mean (degC or file)")
    p.add_argument("--min-coverage", metavar="F", type=float, default=0.5,
                   help="least fraction of a window's days with data (default 0.5)")
    p.add_argument("--json", metavar="OUT", help="write the result as JSON (.json)")
    p.add_argument("--force", action="store_true", help="replace the --json file if it exists (never TABLE)")
    p.add_argument("--no-cache", action="store_true",
                   help="read the grid without the cell-series store (see 'envlink cache')")
    p.add_argument("--no-progress", action="store_true", help="hide the progress bar of the draws")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="read the grid's cells on a dask.distributed cluster (e.g. tcp://10.0.0.5:8786), "
                        "once for every draw; the fits run here (docs/scaling.md)")
    add_locate_arguments(p)
    p.set_defaults(handler=run, name=None, stat=None, window=None)  # only --covariate names covariates


def _locate_options(args: argparse.Namespace) -> dict[str, Any]:
    """How ambiguous dates are read again in each draw, as 'envlink sites' read them."""
    from envlink.commands.sites import parse_season_months

    out: dict[str, Any] = {"plain_season_south": args.plain_season_south}
    if args.order:
        out["order"] = args.order
    if args.season_months:
        out["season_months"] = parse_season_months(args.season_months)
    return out


def run(args: argparse.Namespace) -> int:
    """Run ``envlink impute``; returns the exit code."""
    from envlink.commands.attach import _inputs, _mmm, _open, covariate_specs
    from envlink.commands.scan import model_table
    from envlink.extract.store import cache_root
    from envlink.project.impute import impute_dates
    from envlink.tables import check_output_path

    inputs = _inputs(args)  # never replaced, even with --force
    out = check_output_path(args.json, force=args.force, suffixes=(".json",), inputs=inputs) if args.json else None
    if args.draws < 2:
        raise InputError(f"--draws must be 2 or more (Rubin's rules pool several fits); got {args.draws}.")
    # the vocabularies first: a misspelt name is reported before any file is read
    covs = covariate_specs(args)
    ESTIMATORS.parse(args.method), TESTS.parse(args.test), SPATIAL_RULES.parse(args.spatial)
    table = model_table(args)
    grid = _open(args.grid, args.var)
    shared = {"grid": grid, "spatial": args.spatial, "baseline": args.baseline, "mmm": _mmm(args.mmm),
              "min_coverage": args.min_coverage}
    result = impute_dates(table, [{**c, **shared} for c in covs], effect=args.effect,
                          variance=args.variance, moderators=args.moderators, draws=args.draws,
                          seed=args.seed, effort=args.effort, period=args.period, start=args.start,
                          end=args.end, locate_options=_locate_options(args),
                          progress=False if args.no_progress else None,
                          cache_dir=None if args.no_cache else str(cache_root()), client=args.scheduler,
                          method=args.method, test=args.test, nested=args.nested)
    print("\n".join(result.lines()))
    if out is not None:
        from envlink.core.util import atomic_path

        try:
            with atomic_path(out) as tmp:
                tmp.write_text(json.dumps(result.to_dict(), indent=2, allow_nan=False) + "\n", encoding="utf-8")
        except OSError as exc:
            raise EnvlinkError(f"Cannot write {str(out)!r}: {exc.strerror or exc}.") from exc
        print(f"envlink impute: json -> {out}", file=sys.stderr)
    return 0


#: Python parameter -> option of ``envlink impute``, for messages (envlink.commands.options).
PARAM_OPTIONS = {
    "effect": "--effect", "variance": "--variance", "moderators": "--moderators",
    "nested": "--nested", "method": "--method", "test": "--test", "draws": "--draws",
    "seed": "--seed", "effort": "--effort", "period": "--period", "start": "--start", "end": "--end",
    "spatial": "--spatial", "baseline": "--baseline", "mmm": "--mmm",
    "min_coverage": "--min-coverage", "variable": "--var", "force": "--force", "covariates": "--covariate",
    "progress": {False: "--no-progress"}, "client": "--scheduler",
}
