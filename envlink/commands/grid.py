"""The ``envlink grid`` command: explain what a grid file holds, in one screen or as JSON."""

from __future__ import annotations

import argparse
import dataclasses
import json
import sys

from envlink.commands.options import ParamOptions, command_line_text
from envlink.errors import GridError, InputError

__all__ = ["register", "run", "PARAM_OPTIONS", "add_grid_arguments", "grid_options"]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``grid`` sub-command."""
    p = subparsers.add_parser(
        "grid",
        help="explain what a grid file holds and how envlink reads it",
        description=(
            "Explain a gridded raster (netCDF, Zarr, GeoTIFF, or several files combined\n"
            "along time): its variables, the axes found and how, the conventions applied on\n"
            "reading, the calendar, time coverage, step and gaps, the spatial extent and\n"
            "resolution, the fraction of masked cells, the storage chunking, and warnings.\n"
            "The description goes to stdout; nothing is written to disk."
        ),
        epilog=(
            "examples:\n"
            "  envlink grid sst_monthly.nc\n"
            "  envlink grid 'sst_daily_*.nc' --var analysed_sst --json > sst_daily.json\n"
            "  envlink grid air.tif --band-dates 2001-01-01,2001-02-01 --units degC\n"
            "  envlink grid sst_2001.tif --band-dates R/2001-01-01/P1D --calendar noleap\n\n"
            "Exit codes: 0 described, 2 a file that cannot be read as a grid or a bad option\n"
            "(the message says which and why), 1 unexpected failure. See docs/grids.md."
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="grid file, Zarr store or glob pattern; several are combined along time")
    p.add_argument("--var", dest="variable", metavar="NAME", help="the data variable to read")
    p.add_argument("--json", action="store_true", help="write the description as JSON on stdout")
    p.add_argument("--lat", metavar="NAME", help="name of the latitude axis, when the file does not say")
    p.add_argument("--lon", metavar="NAME", help="name of the longitude axis, when the file does not say")
    p.add_argument("--time", metavar="NAME", help="name of the time axis, when the file does not say")
    p.add_argument("--static", action="store_true", help="the grid has no time axis (e.g. a climatology)")
    add_grid_arguments(p)
    p.add_argument("--no-progress", action="store_true",
                   help="hide the progress bar of opening many files (and its line in a log)")
    p.set_defaults(handler=run)


def add_grid_arguments(p: argparse.ArgumentParser) -> None:
    """The options that declare what a grid file does not say (shared with ``envlink attach``)."""
    p.add_argument("--units", metavar="U", help="units of the grid's values (overrides the file)")
    p.add_argument("--calendar", metavar="C",
                   help="CF calendar of the time axis (overrides the file); GeoTIFF band dates are read in it")
    p.add_argument("--band-dates", metavar="DATES",
                   help="GeoTIFF: the dates of the bands: ISO dates separated by commas, one per band "
                        "(2001-01-01,2001-02-01), intervals START/END, or a repeating interval "
                        "R/2001-01-01/P1M (one band per month)")  # fmt: skip


def grid_options(args: argparse.Namespace) -> dict[str, str]:
    """``open_grid``'s options from the command line's --units, --calendar and --band-dates."""
    options = {"units": args.units, "calendar": args.calendar, "band_dates": args.band_dates}
    return {k: v for k, v in options.items() if v}


#: Python parameter of ``open_grid`` / ``grid_info`` -> option, for messages
#: (envlink.commands.options).
PARAM_OPTIONS: ParamOptions = {
    "variable": "--var", "lat": "--lat", "lon": "--lon",
    "time": {False: "--static", ...: "--time"}, "units": "--units", "calendar": "--calendar",
    "band_dates": "--band-dates",
}


def run(args: argparse.Namespace) -> int:
    """Print the description of the grid; bad files and options exit 2 with a message."""
    from envlink.grids.info import grid_info

    if args.static and args.time:
        raise InputError("Give either --time NAME or --static, not both.")
    options = {"lat": args.lat, "lon": args.lon, "time": False if args.static else args.time,
               "units": None, "calendar": None, **grid_options(args)}  # fmt: skip
    source = args.files[0] if len(args.files) == 1 else list(args.files)
    try:
        info = grid_info(source, args.variable, **options)
    except GridError as exc:
        raise InputError(str(exc)) from None
    # the notes name open_grid's parameters; shown here, they name this command's options
    info = dataclasses.replace(info, warnings=[command_line_text(w, PARAM_OPTIONS) for w in info.warnings])
    if args.json:
        json.dump(info.to_dict(), sys.stdout, indent=2, sort_keys=True)
        sys.stdout.write("\n")
    else:
        print(info)
    return 0
