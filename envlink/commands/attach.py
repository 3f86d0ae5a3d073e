"""``envlink attach``: add covariates from a grid to every row of a table (one or several in one read)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

import numpy as np

from envlink.commands.grid import add_grid_arguments, grid_options
from envlink.commands.sites import (
    add_locate_arguments,
    input_files,
    locate_kwargs,
    note_unused_locate_options,
)
from envlink.core.columns import COVARIATE_NAME_RULE, covariate_name_ok
from envlink.errors import InputError, param_error
from envlink.extract.rules import SPATIAL_RULES
from envlink.extract.statistics import STATISTICS
from envlink.extract.windows import TIME_WEIGHTS, WINDOWS

__all__ = ["register", "run", "summary", "located_numbers", "covariate_specs"]

_LOCATE_COLUMNS = ("site_lat", "site_lon", "period_start", "period_end")
#: columns of 'envlink sites' that hold numbers (read from CSV text as float64)
_LOCATED_NUMBERS = ("site_lat", "site_lon", "site_precision_km")

DESCRIPTION = """\
Attach covariates from a gridded raster to every row of a table, over each row's
own time window, and write the table with six new columns per covariate: NAME (the
value, in canonical units), NAME_flags (QA codes separated by ';'), NAME_cell_lat,
NAME_cell_lon (the cell used), NAME_distance_km and NAME_coverage (fraction of the
window's days with data). Every input row and column is kept as it was; a row that
cannot get a value keeps an empty value and a flag saying why.

One covariate: --name NAME [--stat STAT] [--window WINDOW]. Several from one read
of the grid: repeat --covariate NAME=STAT or NAME=STAT@WINDOW instead (the other
options apply to every covariate).

TABLE should hold the columns that 'envlink sites' adds. If it does not, give the
same column options as 'envlink sites' (--lat/--lon, --coords, --site with
--gazetteer, --period or --start/--end) and the rows are located first; locating
with no date option warns, as no row then has a period."""

EPILOG = """\
Statistics, windows and spatial rules are listed in the --stat, --window and --spatial
help above (docs/extract.md explains each). Names are case-insensitive, '-' and '_'
are the same, a distance's 'km' is optional and numbers may be written in any decimal
form: 'Nearest_Valid:25', 'nearest-valid:25km' and 'nearest-valid:25.0 KM' are one rule,
recorded as nearest-valid:25km.

examples:
  envlink attach located.csv --grid sst_monthly.nc --name sst_mean -o with_sst.csv
  envlink attach located.csv --grid sst_daily.nc --name dhw --stat dhw-max \\
      --mmm 28.7 --spatial nearest-valid:25km -o with_dhw.csv
  envlink attach located.csv --grid sst_monthly.nc --covariate sst_mean=mean \\
      --covariate sst_lag3=mean@lag:3M --covariate sst_max=max -o with_sst.csv

Each cell's series read from a grid file is kept in the cell-series store,
$ENVLINK_CACHE/cells (default ~/.cache/envlink/cells), so later runs on the same
cells (any statistic, window or baseline) read the store instead of the grid;
'envlink cache' lists and clears it; --no-cache reads the grid without it.
--scheduler ADDRESS reads the cells on a Dask cluster (started with 'dask scheduler'
and 'dask worker ADDRESS'; the values are those of a read on this machine); the
workers need the grid's files and $ENVLINK_CACHE at the same paths (docs/scaling.md).
Exit codes: 0 done (even with rows lacking a value), 2 bad input (including a grid
file that cannot be opened, or an output path that cannot be written), 1 failure
of the run (e.g. grid values that cannot be decoded or read). A cache that
cannot be written gives a warning, and the run goes on without it. See docs/extract.md."""


class _HelpFormatter(argparse.RawDescriptionHelpFormatter):
    """Option help wrapped at spaces only, so names such as 'dhw-max' stay whole."""

    def _split_lines(self, text: str, width: int) -> list[str]:
        import textwrap

        return textwrap.wrap(" ".join(text.split()), width, break_on_hyphens=False)


def register(subparsers: Any) -> None:
    """Add the ``attach`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "attach",
        help="attach a covariate from a grid to every row, over per-row windows",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=_HelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--grid", metavar="FILE", required=True, help="the grid: netCDF, Zarr, GeoTIFF or a glob of files")
    p.add_argument("--var", metavar="NAME", help="the grid's variable (needed when the file holds several)")
    add_grid_arguments(p)
    p.add_argument("--name", metavar="COLUMN", help="name of the new covariate column (one covariate): letters, digits and _, "
                        "not starting with a digit")
    p.add_argument("--stat", metavar="STAT",
                   help=f"window statistic: {STATISTICS.help_text()} (default mean)")
    p.add_argument("--window", metavar="WINDOW",
                   help=f"time window of each row: {WINDOWS.help_text()} (default period)")
    p.add_argument("--covariate", metavar="NAME=STAT[@WINDOW]", action="append",
                   help="one covariate of several computed from one read of the grid, e.g. sst_lag3=mean@lag:3M "
                        "(repeat it; instead of --name, --stat and --window)")
    p.add_argument("--baseline", metavar="YYYY-YYYY", help="climatology years for anomaly, mmm, dhw-max (default: the grid's span)")
    p.add_argument("--mmm", metavar="VALUE|FILE", help="dhw-max: the maximum monthly mean in degC, or a static climatology grid")
    p.add_argument("--spatial", metavar="RULE", default="nearest",
                   help=f"spatial rule: {SPATIAL_RULES.help_text()} (default nearest)")
    p.add_argument("--time-weights", metavar="WEIGHTS", default="duration",
                   help=f"how time steps count in the window: {TIME_WEIGHTS.help_text()} (default duration)")
    p.add_argument("--min-coverage", metavar="F", type=float, default=0.5,
                   help="least fraction of the window's days with data for a value (default 0.5)")
    p.add_argument("-o", "--output", metavar="OUT", required=True, help="output table (.csv, .tsv, .parquet, .xlsx)")
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    p.add_argument("--no-cache", action="store_true", help="do not read or write the cell-series store")
    p.add_argument("--no-progress", action="store_true", help="hide the progress bars")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="read the grid's cells on a dask.distributed cluster (e.g. tcp://10.0.0.5:8786): "
                        "each storage tile once, by one worker; the workers write the cell-series store, "
                        "so $ENVLINK_CACHE should be a folder every worker sees (docs/scaling.md)")
    # The column and reading options of 'envlink sites', used when TABLE is not located yet.
    add_locate_arguments(p)
    p.set_defaults(handler=run)


def summary(result: Any, name: str | list[str], out: str) -> str:
    """The stderr summary: rows with a value, flagged, missing, and rows per flag (per covariate)."""
    import pandas as pd

    names = [name] if isinstance(name, str) else list(name)
    lines = [f"envlink attach: {len(result)} rows -> {out}"]
    for c in names:
        values = result[c].to_numpy(dtype=np.float64)
        flags = result[f"{c}_flags"].fillna("").astype(str)
        have = np.isfinite(values)
        flagged = int((have & (flags != "").to_numpy()).sum())
        pad = "  " if len(names) == 1 else "    "
        if len(names) > 1:
            lines.append(f"  {c}:")
        lines += [
            f"{pad}values   {int(have.sum()):>7}",
            f"{pad}flagged  {flagged:>7}  (value given, with QA flags)",
            f"{pad}missing  {int((~have).sum()):>7}",
        ]
        codes = flags[flags != ""].str.split(";").explode()
        counts = pd.Series(codes.to_numpy(), dtype=object).value_counts() if len(codes) else pd.Series([], dtype=int)
        if len(counts):
            width = max(len(str(f)) for f in counts.index)
            lines.append(f"{pad}rows per flag:")
            lines += [f"{pad}  {f:<{width}} {int(n):>7}"
                      for f, n in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))]
        land = int(counts.get("cell_on_land", 0))
        if land:
            lines.append(
                f"{pad}{land} row(s) fall on a grid cell with no value at any time (land or masked); "
                "--spatial nearest-valid:25km takes the nearest cell with data within 25 km instead."
            )
        origin = (result.attrs.get("envlink", {}).get(c) or {}).get("cells")
        if origin and origin != "none":
            lines.append(f"{pad}cells    {_ORIGIN_WORDS.get(origin, origin)}")
    return "\n".join(lines)


_ORIGIN_WORDS = {"store": "from the cell-series store", "read": "read from the grid",
                 "partly store": "partly from the cell-series store, partly read from the grid"}


def _open(source: str, variable: str | None = None, **options: Any) -> Any:
    """``open_grid``, with a grid that cannot be opened reported as bad input (exit 2),
    as ``envlink grid`` reports it."""
    from envlink.errors import GridError
    from envlink.grids.open import open_grid

    try:
        return open_grid(source, variable, **options)
    except GridError as exc:
        raise InputError(str(exc)) from None


def _mmm(value: str | None) -> Any:
    if value is None:
        return None
    try:
        return float(value)
    except ValueError:
        pass
    if not Path(value).exists():
        raise InputError(f"--mmm {value!r} is neither a number (degC) nor an existing climatology file.")
    return _open(value, time=False).load()


def located_numbers(table: Any, where: str = "") -> Any:
    """``table`` with the located number columns (site_lat, site_lon, site_precision_km) as float64.

    A CSV is read as text, so those columns come back as the text 'envlink sites'
    wrote; typed tables (Parquet, Excel) keep them as stored. Every other column is
    left as it is. A cell that is not a number is an :class:`InputError` naming the
    column and the row (counted from 1).

    Examples
    --------
    >>> import pandas as pd
    >>> t = located_numbers(pd.DataFrame({"site_lat": ["-8,5", ""], "id": ["007", "8"]}))
    >>> t["site_lat"].tolist(), t["id"].tolist()
    ([-8.5, nan], ['007', '8'])
    """
    import pandas as pd

    from envlink.tables import number_columns

    cols = [c for c in _LOCATED_NUMBERS if c in table.columns and not pd.api.types.is_numeric_dtype(table[c])]
    if not cols:
        return table
    values = number_columns(table, cols, numbers=cols, where=where)
    out = table.copy()
    for c in cols:
        out[c] = pd.Series(values[c], index=table.index, dtype="float64")
    return out


def _inputs(args: argparse.Namespace) -> dict[str, str]:
    """Every file the command reads (never an output): TABLE, the grid's files, --mmm, the gazetteer."""
    import glob

    files = input_files(args)
    for option, value in (("--grid", args.grid), ("--mmm", args.mmm)):
        if value:
            for path in glob.glob(value) if glob.has_magic(value) else [value]:
                files[path] = option
    return files


def covariate_specs(args: argparse.Namespace) -> list[dict[str, Any]]:
    """The covariates asked for: ``--name`` [``--stat``, ``--window``], or each ``--covariate``.

    Every statistic and window is read through its registry here, so a misspelt name
    is reported before any file is read.
    """
    from envlink.extract.covariates import SPEC_FORM, parse_covariates

    if args.covariate:
        single = [o for o, v in (("--name", args.name), ("--stat", args.stat), ("--window", args.window))
                  if v is not None]
        if single:
            raise InputError(f"Give either --covariate NAME=STAT[@WINDOW] (repeated) or --name (with --stat "
                             f"and --window), not both ({single[0]} was given too); each --covariate is "
                             f"{SPEC_FORM}.")
        for text in args.covariate:
            name, eq, rest = text.partition("=")
            if not eq or not name.strip() or not rest.partition("@")[0].strip():
                raise InputError(f"--covariate {text!r}: write {SPEC_FORM}.")
            if not covariate_name_ok(name.strip()):
                raise InputError(f"--covariate {text!r}: the name {name.strip()!r} must be {COVARIATE_NAME_RULE}.")
            stat, _, window = rest.partition("@")
            for reg, value in ((STATISTICS, stat), (WINDOWS, window or "period")):
                if not reg.accepts(value):
                    raise InputError(f"--covariate {text!r}: {_refusal(reg, value)}")
        covs = parse_covariates(args.covariate, {"stat": "mean", "window": "period"}, "attach")
    elif args.name is not None:
        if not covariate_name_ok(args.name):
            raise param_error("name", "attach", COVARIATE_NAME_RULE, args.name)
        covs = [{"name": args.name, "stat": "mean" if args.stat is None else args.stat,
                 "window": "period" if args.window is None else args.window}]
    else:
        raise InputError("Name the covariate: --name COLUMN (with --stat and --window), or give "
                         "--covariate NAME=STAT[@WINDOW] once per covariate.")
    for c in covs:  # canonical labels, read through the registries
        c["stat"], c["window"] = STATISTICS.parse(c["stat"]).label(), WINDOWS.parse(c["window"]).label()
    return covs


def _refusal(reg: Any, value: str) -> str:
    """The registry's own refusal of ``value``, without the Python parameter's name."""
    import re

    try:
        reg.parse(value)
    except InputError as exc:
        word = "the statistic" if reg is STATISTICS else "the window"
        return re.sub(r"^The '\w+' parameter of [\w.]+", word, str(exc))
    return ""


def run(args: argparse.Namespace) -> int:
    """Run ``envlink attach``; returns the exit code."""
    from envlink.extract.cluster_read import cluster_client

    # the vocabularies first: a misspelt name is reported before any file is read
    covs = covariate_specs(args)
    spatial = SPATIAL_RULES.parse(args.spatial)
    with cluster_client(getattr(args, "scheduler", None)) as client:
        return _attach(args, covs, spatial.label(), client)


def _attach(args: argparse.Namespace, covs: list[dict[str, Any]], spatial: str, client: Any) -> int:
    """``envlink attach`` once the options are read (``client``: the cluster's, or None)."""
    from envlink.extract.attach import attach_many
    from envlink.extract.store import cache_root
    from envlink.tables import (
        check_cells_writable,
        check_output_path,
        read_table_as_written,
        write_table,
    )

    progress = False if args.no_progress else None
    out = check_output_path(args.output, force=args.force, inputs=_inputs(args))
    table = read_table_as_written(args.table)
    check_cells_writable(table, out)
    if not all(c in table.columns for c in _LOCATE_COLUMNS):
        given = ("lat", "lon", "coords", "site", "gazetteer", "period", "start", "end")
        if not any(getattr(args, k) for k in given):
            missing = [c for c in _LOCATE_COLUMNS if c not in table.columns]
            raise InputError(
                f"The table lacks the located columns {', '.join(missing)}; run 'envlink sites' first, or give "
                "--lat/--lon, --coords or --site/--gazetteer and --period or --start/--end to locate here."
            )
        from envlink.locate.sites import locate

        table = locate(table, progress=progress, **locate_kwargs(args))
        _warn_without_dates(args)
    else:
        note_unused_locate_options(args, "attach")
    table = located_numbers(table, where=f"Table {str(args.table)!r}")
    grid = _open(args.grid, args.var, **grid_options(args))
    result = attach_many(
        table, grid, covs, spatial=spatial, baseline=args.baseline, mmm=_mmm(args.mmm),
        time_weights=args.time_weights, min_coverage=args.min_coverage,
        cache_dir=None if args.no_cache else str(cache_root()), progress=progress, client=client,
    )
    write_table(result, out, force=True)
    print(summary(result, [c["name"] for c in covs], str(out)), file=sys.stderr)
    return 0


def _warn_without_dates(args: argparse.Namespace) -> None:
    """Warn when ``attach`` located the table with no date option: no row can get a covariate."""
    import warnings

    from envlink.errors import TableWarning

    if not any(getattr(args, k, None) for k in ("period", "start", "end")):
        warnings.warn(
            "The table was located without a date option, so every row lacks a period (flag no_period) "
            "and no covariate can be computed; give --period COL, or --start COL --end COL.",
            TableWarning, stacklevel=2,
        )


#: Python parameter -> option of ``envlink attach``, for messages (envlink.commands.options).
#: ``lat``/``lon`` are left out: they also name open_grid's axis options, which this
#: command does not offer (its --lat/--lon are table columns, checked before locate runs).
PARAM_OPTIONS = {
    "variable": "--var", "band_dates": "--band-dates", "units": "--units", "calendar": "--calendar",
    "name": "--name", "covariates": "--covariate", "progress": {False: "--no-progress"},
    "stat": "--stat", "window": "--window",
    "baseline": "--baseline", "mmm": "--mmm", "spatial": "--spatial",
    "time_weights": "--time-weights", "min_coverage": "--min-coverage", "force": "--force",
    "coords": "--coords", "site": "--site", "gazetteer": "--gazetteer", "name_col": "--gazetteer-name",
    "fuzzy_threshold": "--fuzzy-threshold", "fuzzy_margin": "--fuzzy-margin",
    "period": "--period", "start": "--start", "end": "--end",
    "order": {"dayfirst": "--dayfirst", "monthfirst": "--monthfirst"},
    "plain_season_south": "--plain-season-south", "season_months": "--season-months",
    "client": "--scheduler",
}
