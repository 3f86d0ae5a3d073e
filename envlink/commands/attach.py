"""``envlink attach``: add one covariate from a grid to every row of a table."""

from __future__ import annotations

import argparse
import sys
from collections import Counter
from pathlib import Path
from typing import Any

import numpy as np

from envlink.commands.sites import add_locate_arguments, locate_kwargs
from envlink.errors import InputError

__all__ = ["register", "run", "summary", "located_numbers"]

_LOCATE_COLUMNS = ("site_lat", "site_lon", "period_start", "period_end")
#: columns of 'envlink sites' that hold numbers (read from CSV text as float64)
_LOCATED_NUMBERS = ("site_lat", "site_lon", "site_precision_km")

DESCRIPTION = """\
Attach one covariate from a gridded raster to every row of a table, over each row's
own time window, and write the table with six new columns: NAME (the value, in
canonical units), NAME_flags (QA codes separated by ';'), NAME_cell_lat,
NAME_cell_lon (the cell used), NAME_distance_km and NAME_coverage (fraction of the
window's days with data). Every input row and column is kept as it was; a row that
cannot get a value keeps an empty value and a flag saying why.

TABLE should hold the columns that 'envlink sites' adds. If it does not, give the
same column options as 'envlink sites' (--lat/--lon, --coords, --site with
--gazetteer, --period or --start/--end) and the rows are located first."""

EPILOG = """\
statistics (--stat): mean, min, max, sum, std, quantile:Q, above:T, degree-days:T,
  anomaly, mmm, dhw-max
windows (--window): period, lag:N{D|M|Y}, before-start:N{D|M|Y}, after-end:N{D|M|Y},
  around-mid:N{D|M|Y}
spatial rules (--spatial): nearest, bilinear, nearest-valid:Dkm, buffer:Rkm, polygon

examples:
  envlink attach located.csv --grid sst_monthly.nc --name sst_mean -o with_sst.csv
  envlink attach located.csv --grid sst_daily.nc --name dhw --stat dhw-max \\
      --mmm 28.7 --spatial nearest-valid:25km -o with_dhw.csv

Results are cached in $ENVLINK_CACHE (default ~/.cache/envlink); --no-cache skips it.
Exit codes: 0 done (even with rows lacking a value), 2 bad input (including a grid
file that cannot be opened, or an output path that cannot be written), 1 failure
of the run (e.g. grid values that cannot be decoded while reading). A cache that
cannot be written gives a warning, and the run goes on without it. See docs/extract.md."""


def register(subparsers: Any) -> None:
    """Add the ``attach`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "attach",
        help="attach a covariate from a grid to every row, over per-row windows",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--grid", metavar="FILE", required=True, help="the grid: netCDF, Zarr, GeoTIFF or a glob of files")
    p.add_argument("--var", metavar="NAME", help="the grid's variable (needed when the file holds several)")
    p.add_argument("--name", metavar="COLUMN", required=True, help="name of the new covariate column")
    p.add_argument("--stat", metavar="STAT", default="mean", help="window statistic (default mean)")
    p.add_argument("--window", metavar="WINDOW", default="period", help="time window of each row (default period)")
    p.add_argument("--baseline", metavar="YYYY-YYYY", help="climatology years for anomaly, mmm, dhw-max (default: the grid's span)")
    p.add_argument("--mmm", metavar="VALUE|FILE", help="dhw-max: the maximum monthly mean in degC, or a static climatology grid")
    p.add_argument("--spatial", metavar="RULE", default="nearest", help="spatial rule (default nearest)")
    p.add_argument("--time-weights", choices=("duration", "equal"), default="duration",
                   help="how time steps count in the window (default duration)")
    p.add_argument("--min-coverage", metavar="F", type=float, default=0.5,
                   help="least fraction of the window's days with data for a value (default 0.5)")
    p.add_argument("-o", "--output", metavar="OUT", required=True, help="output table (.csv, .tsv, .parquet, .xlsx)")
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    p.add_argument("--no-cache", action="store_true", help="do not read or write the result cache")
    # The column and reading options of 'envlink sites', used when TABLE is not located yet.
    add_locate_arguments(p)
    p.set_defaults(handler=run)


def summary(result: Any, name: str, out: str) -> str:
    """The stderr summary: rows with a value, flagged, missing, and rows per flag."""
    values = result[name].to_numpy(dtype=np.float64)
    flags = result[f"{name}_flags"].fillna("").astype(str).tolist()
    counts: Counter[str] = Counter()
    for cell in flags:
        if cell:
            counts.update(cell.split(";"))
    have = np.isfinite(values)
    flagged = sum(1 for v, f in zip(have, flags, strict=True) if v and f)
    lines = [
        f"envlink attach: {len(result)} rows -> {out}",
        f"  values   {int(have.sum()):>7}",
        f"  flagged  {flagged:>7}  (value given, with QA flags)",
        f"  missing  {int((~have).sum()):>7}",
    ]
    if counts:
        width = max(len(f) for f in counts)
        lines.append("  rows per flag:")
        lines += [f"    {f:<{width}} {c:>7}" for f, c in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))]
    return "\n".join(lines)


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


def run(args: argparse.Namespace) -> int:
    """Run ``envlink attach``; returns the exit code."""
    from envlink.extract.attach import attach
    from envlink.extract.cache import default_cache_dir
    from envlink.tables import check_output_path, read_table_as_written, write_table

    out = check_output_path(args.output, force=args.force)
    table = read_table_as_written(args.table)
    if not all(c in table.columns for c in _LOCATE_COLUMNS):
        given = ("lat", "lon", "coords", "site", "gazetteer", "period", "start", "end")
        if not any(getattr(args, k) for k in given):
            missing = [c for c in _LOCATE_COLUMNS if c not in table.columns]
            raise InputError(
                f"The table lacks the located columns {', '.join(missing)}; run 'envlink sites' first, or give "
                "--lat/--lon, --coords or --site/--gazetteer and --period or --start/--end to locate here."
            )
        from envlink.locate.sites import locate

        table = locate(table, **locate_kwargs(args))
    table = located_numbers(table, where=f"Table {str(args.table)!r}")
    grid = _open(args.grid, args.var)
    result = attach(
        table, grid, name=args.name, stat=args.stat, window=args.window, spatial=args.spatial,
        baseline=args.baseline, mmm=_mmm(args.mmm), time_weights=args.time_weights,
        min_coverage=args.min_coverage, cache_dir=None if args.no_cache else str(default_cache_dir()),
    )
    write_table(result, out, force=True)
    print(summary(result, args.name, str(out)), file=sys.stderr)
    return 0
