"""``envlink sites``: locate every row of a table (sites and periods) and write the result."""

from __future__ import annotations

import argparse
import json
import sys
from collections import Counter
from pathlib import Path
from typing import Any

from envlink.errors import InputError

__all__ = [
    "register", "run", "add_locate_arguments", "locate_kwargs", "input_files", "parse_season_months",
    "summary", "LOCATE_OPTIONS", "PARAM_OPTIONS",
]

DESCRIPTION = """\
Read a table of compiled studies and add validated site coordinates and sampling
periods with QA flags: site_lat, site_lon, site_precision_km, site_wkt,
period_start, period_end, period_precision, locate_status (ok / flagged /
rejected), locate_flags and locate_notes. Every input row and column is kept as it
was. Rows may mix forms: where --lat/--lon are blank, --coords is tried, then
--site through the gazetteer. A value that cannot be read rejects its row (with a
flag and a note) but does not stop the run: the exit code is 0."""

EPILOG = """\
example:
  envlink sites surveys.csv -o located.csv --lat lat --lon lon --coords position \\
      --site reef --gazetteer vell_reefs.gpkg --period sampled --dayfirst

Exit codes: 0 done (even with rejected rows), 2 bad input (missing column,
unreadable file, bad option), 1 unexpected failure. See docs/locate.md."""


def register(subparsers: Any) -> None:
    """Add the ``sites`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "sites",
        help="locate rows: coordinates, site names and dates to validated sites and periods",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("-o", "--output", metavar="OUT", required=True,
                   help="output table; the format follows the extension (.csv, .tsv, .parquet, .xlsx)")
    add_locate_arguments(p)
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    p.add_argument("--no-progress", action="store_true", help="hide the progress bar (and its line in a log)")
    p.set_defaults(handler=run)


#: The Python parameters of ``locate()`` / ``read_gazetteer()`` -> the options of
#: :func:`add_locate_arguments` (shared with ``envlink attach``).
LOCATE_OPTIONS = {
    "lat": "--lat", "lon": "--lon", "coords": "--coords", "site": "--site",
    "gazetteer": "--gazetteer", "name_col": "--gazetteer-name",
    "fuzzy_threshold": "--fuzzy-threshold", "fuzzy_margin": "--fuzzy-margin",
    "period": "--period", "start": "--start", "end": "--end",
    "order": {"dayfirst": "--dayfirst", "monthfirst": "--monthfirst"},
    "plain_season_south": "--plain-season-south", "season_months": "--season-months",
}
#: Python parameter -> option of ``envlink sites``, for messages (envlink.commands.options).
PARAM_OPTIONS = {**LOCATE_OPTIONS, "force": "--force", "progress": {False: "--no-progress"}}


#: the locate options' defaults (used by add_locate_arguments and to tell an option given)
LOCATE_DEFAULTS = {"fuzzy_threshold": 85.0, "fuzzy_margin": 5.0, "plain_season_south": "ambiguous"}


def add_locate_arguments(p: argparse.ArgumentParser) -> None:
    """Add the column and reading options of ``envlink sites`` to a parser.

    Shared with commands that locate a table first (``envlink attach``); pair it with
    :func:`locate_kwargs`.
    """
    g = p.add_argument_group("where")
    g.add_argument("--lat", metavar="COL", help="column with latitudes (with --lon)")
    g.add_argument("--lon", metavar="COL", help="column with longitudes (with --lat)")
    g.add_argument("--coords", metavar="COL", help="column with both coordinates in one cell")
    g.add_argument("--site", metavar="COL", help="column with site names (with --gazetteer)")
    g.add_argument("--gazetteer", metavar="FILE",
                   help="named sites: a CSV with name and coordinates, or a GeoPackage / shapefile / GeoJSON")
    g.add_argument("--gazetteer-name", metavar="COL",
                   help="the gazetteer's site-name column (default: recognised among site, name, reef, ...)")
    g.add_argument("--fuzzy-threshold", metavar="SCORE", type=float,
                   default=LOCATE_DEFAULTS["fuzzy_threshold"],
                   help="lowest spelling-similarity score (0-100) for a fuzzy site-name match (default 85)")
    g.add_argument("--fuzzy-margin", metavar="POINTS", type=float,
                   default=LOCATE_DEFAULTS["fuzzy_margin"],
                   help="two places scoring within this many points are ambiguous (default 5)")
    w = p.add_argument_group("when")
    w.add_argument("--period", metavar="COL", help="column with the sampling period in one cell")
    w.add_argument("--start", metavar="COL", help="column with the period's start (with --end)")
    w.add_argument("--end", metavar="COL", help="column with the period's end (with --start)")
    order = w.add_mutually_exclusive_group()
    order.add_argument("--dayfirst", dest="order", action="store_const", const="dayfirst",
                       help="read 05/06/2011 as 5 June 2011")
    order.add_argument("--monthfirst", dest="order", action="store_const", const="monthfirst",
                       help="read 05/06/2011 as 6 May 2011")
    w.add_argument("--plain-season-south", choices=("ambiguous", "austral", "boreal"),
                   default=LOCATE_DEFAULTS["plain_season_south"],
                   help="how a plain season ('summer 2010') at a southern site is read (default: ambiguous, flagged)")
    w.add_argument("--season-months", metavar="JSON_OR_FILE",
                   help="months of named seasons, as JSON or a JSON file, e.g. '{\"wet\": [11,12,1,2,3,4]}'")


def note_unused_locate_options(args: argparse.Namespace, command: str, keep: tuple[str, ...] = ()) -> None:
    """On stderr, the locate options given for a table that is located already (they are not used).

    ``keep``: options the command uses even then (``envlink impute`` reads ``--period``
    to draw the readings of ambiguous dates).
    """
    import sys

    given = []
    for param, option in LOCATE_OPTIONS.items():
        value = getattr(args, param, None)
        if value is None or value == LOCATE_DEFAULTS.get(param) or param in keep:
            continue
        given.append(str(option[value] if isinstance(option, dict) else option))
    if given:
        print(f"envlink {command}: note: TABLE has the located columns already (site_lat, site_lon, "
              f"period_start, period_end), so {', '.join(given)} {'was' if len(given) == 1 else 'were'} "
              "not used; to read the places or dates again, run 'envlink sites' on the original "
              "table.", file=sys.stderr)


def parse_season_months(value: str | None) -> dict[str, list[int]] | None:
    """Read ``--season-months``: a JSON object (inline or in a file) of season -> months 1-12.

    Examples
    --------
    >>> parse_season_months('{"wet": [11, 12, 1]}')
    {'wet': [11, 12, 1]}
    """
    if value is None:
        return None
    text = value
    path = Path(value)
    if not value.lstrip().startswith("{"):
        if not path.is_file():
            raise InputError(
                f"--season-months {value!r} is neither a JSON object nor a file; "
                "expected e.g. '{\"wet\": [11, 12, 1, 2, 3, 4]}'."
            )
        try:
            text = path.read_text(encoding="utf-8-sig")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"Cannot read --season-months file {value!r}: {exc}") from exc
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"--season-months is not valid JSON ({exc.msg} at character {exc.pos}).") from exc
    ok = isinstance(data, dict) and all(
        isinstance(k, str) and isinstance(v, list) and v
        and all(isinstance(m, int) and not isinstance(m, bool) and 1 <= m <= 12 for m in v)
        for k, v in data.items()
    )
    if not ok or not data:
        raise InputError(
            "--season-months must map season names to lists of month numbers 1-12, "
            f"e.g. '{{\"wet\": [11, 12, 1, 2, 3, 4]}}'; got {text.strip()[:80]!r}."
        )
    return {str(k): [int(m) for m in v] for k, v in data.items()}


def summary(located: Any, out: str) -> str:
    """The stderr summary: rows per status and rows per flag."""
    from envlink.core.flags import split_flags

    status = Counter(located["locate_status"].tolist())
    flags: Counter[str] = Counter()
    for cell in located["locate_flags"].tolist():
        if cell:
            flags.update(split_flags(cell))
    n = len(located)
    lines = [f"envlink sites: {n} row{'' if n == 1 else 's'} -> {out}"]
    lines += [f"  {s:<9} {status.get(s, 0):>7}" for s in ("ok", "flagged", "rejected")]
    if flags:
        width = max(len(f) for f in flags)
        lines.append("  rows per flag:")
        lines += [f"    {f:<{width}} {c:>7}" for f, c in sorted(flags.items(), key=lambda kv: (-kv[1], kv[0]))]
    if status.get("rejected") or status.get("flagged"):
        lines.append("  (locate_notes explains each flagged or rejected row)")
    return "\n".join(lines)


def input_files(args: argparse.Namespace) -> dict[str, str]:
    """The files a locating command reads (TABLE, the gazetteer, a season file): never outputs."""
    files = {args.table: "TABLE"}
    if getattr(args, "gazetteer", None):
        files[args.gazetteer] = "--gazetteer"
    season = getattr(args, "season_months", None)
    if season and not season.lstrip().startswith("{"):
        files[season] = "--season-months"
    return files


def locate_kwargs(args: argparse.Namespace) -> dict[str, Any]:
    """Check the options added by :func:`add_locate_arguments`; return ``locate()`` keywords.

    Reads the gazetteer file, so a bad one is reported before the table is processed.
    """
    from envlink.locate.gazetteer import read_gazetteer

    if not 0 <= args.fuzzy_threshold <= 100:
        raise InputError(f"--fuzzy-threshold must be a score from 0 to 100; got {args.fuzzy_threshold:g}.")
    if args.fuzzy_margin < 0:
        raise InputError(f"--fuzzy-margin must be zero or more points; got {args.fuzzy_margin:g}.")
    if bool(args.lat) != bool(args.lon):
        given, other = ("--lat", "--lon") if args.lat else ("--lon", "--lat")
        raise InputError(f"{given} needs {other} COL too: latitude and longitude columns go together.")
    if args.period and (args.start or args.end):
        raise InputError("Give either --period COL (the period in one cell) or --start COL --end COL, not both.")
    if bool(args.start) != bool(args.end):
        given, other = ("--start", "--end") if args.start else ("--end", "--start")
        raise InputError(f"{given} needs {other} COL too: the period's start and end columns go together.")
    if not any((args.lat, args.coords, args.site, args.period, args.start)):
        raise InputError(
            "No column to read: give --lat COL --lon COL, --coords COL or --site COL --gazetteer FILE "
            "for the places, and --period COL or --start COL --end COL for the dates."
        )
    if args.site and not args.gazetteer:
        raise InputError("--site needs --gazetteer FILE, the table of named sites to look the names up in.")
    if args.gazetteer and not args.site:
        raise InputError("--gazetteer is only used with --site COL, the column of site names.")
    season_months = parse_season_months(args.season_months)
    gazetteer = read_gazetteer(args.gazetteer, name_col=args.gazetteer_name) if args.gazetteer else None
    return {
        "lat": args.lat, "lon": args.lon, "coords": args.coords, "site": args.site,
        "gazetteer": gazetteer, "period": args.period, "start": args.start, "end": args.end,
        "order": args.order, "plain_season_south": args.plain_season_south,
        "season_months": season_months, "fuzzy_threshold": args.fuzzy_threshold,
        "fuzzy_margin": args.fuzzy_margin,
    }


def run(args: argparse.Namespace) -> int:
    """Run ``envlink sites``; returns the exit code."""
    from envlink.locate.sites import locate
    from envlink.tables import (
        check_cells_writable,
        check_output_path,
        read_table_as_written,
        write_table,
    )

    out = check_output_path(args.output, force=args.force, inputs=input_files(args))
    options = locate_kwargs(args)
    table = read_table_as_written(args.table)
    check_cells_writable(table, out)
    located = locate(table, progress=False if args.no_progress else None, **options)
    write_table(located, out, force=True)
    print(summary(located, str(out)), file=sys.stderr)
    return 0
