"""``envlink cache``: list, size and clear the cell-series store (each grid cell's series kept on disk)."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from envlink.errors import InputError

__all__ = ["register", "run", "PARAM_OPTIONS"]

DESCRIPTION = """\
The cell-series store keeps the whole series of every grid cell that 'envlink attach'
or 'envlink run' has read from a grid file, so later requests on those cells (any
statistic, window, baseline, lag or threshold) read the store instead of the grid.
It lives in the cells folder of envlink's cache folder: $ENVLINK_CACHE, else
$XDG_CACHE_HOME/envlink, else ~/.cache/envlink (--dir DIR to look elsewhere), one
folder per grid, and holds at most $ENVLINK_STORE_MAX bytes (default 2G), the least
recently used series going first.

  envlink cache [list]     one line per grid: its key, file, variable, cells, time
                           span, size and last use, then the total
  envlink cache clear --all
  envlink cache clear GRID ...
                           remove every grid's store, or those of GRID: a key (or
                           its first characters, as listed) or a grid file's path"""

EPILOG = """\
examples:
  envlink cache
  envlink cache list --json
  envlink cache clear data/sst_monthly.nc
  envlink cache clear --all

Clearing never changes a result: the cells are read from the grid again when next
needed. Exit codes: 0 done, 2 bad usage (clear without --all or GRID, or a GRID that
no store matches), 1 a store that could not be removed. See docs/store.md."""


def register(subparsers: Any) -> None:
    """Add the ``cache`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "cache", help="list, size and clear the cell-series store", description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )  # fmt: skip
    p.add_argument("words", nargs="*", metavar="ACTION",
                   help="'list' the stores (the default), or 'clear' them: every one (--all) or those of each "
                        "GRID named after it (a key as listed, or a grid file)")
    p.add_argument("--all", action="store_true", help="clear: every grid's store")
    p.add_argument("--dir", metavar="DIR", help="envlink's cache folder (default: $ENVLINK_CACHE, else the user's)")
    p.add_argument("--json", action="store_true", help="list: write the stores as JSON on stdout")
    p.add_argument("--no-progress", action="store_true", help="accepted for every command; this one draws none")
    # words after an option (`clear --all GRID`) are this command's to judge (envlink.cli)
    p.set_defaults(handler=run, late_words="words")


#: Python parameter -> option of ``envlink cache``, for messages (envlink.commands.options).
PARAM_OPTIONS = {"cache_dir": "--dir"}


def _size(n: float) -> str:
    """Bytes in words (binary units).

    Examples
    --------
    >>> _size(0), _size(1536), _size(3 * 2**30)
    ('0 B', '1.5 KiB', '3.0 GiB')
    """
    for unit in ("B", "KiB", "MiB", "GiB"):
        if n < 1024 or unit == "GiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} TiB"  # pragma: no cover


def _matches(info: Any, what: str) -> bool:
    """A store matches GRID by its key's first characters or by one of its files' paths."""
    if len(what) >= 4 and info.key.startswith(what.lower()):
        return True
    try:
        meta = json.loads((info.folder / "grid.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    target = str(Path(what).expanduser().resolve())
    return any(isinstance(f, dict) and f.get("path") == target for f in meta.get("files", []))


def run(args: argparse.Namespace) -> int:
    """Run ``envlink cache``; returns the exit code."""
    from envlink.extract.store import store_limit, store_root
    from envlink.extract.storefiles import clear_stores, list_stores

    action, grids = (args.words[0], args.words[1:]) if args.words else ("list", [])
    if action not in ("list", "clear"):
        raise InputError(f"envlink cache takes 'list' or 'clear'; got {action!r}.")
    args.grids = grids
    root = store_root(args.dir)
    stores = list_stores(root)
    if action == "list":
        if args.grids or args.all:
            raise InputError("GRID and --all go with 'envlink cache clear'; 'list' shows every store.")
        _print_list(stores, root, store_limit(), args.json)
        return 0
    if args.all == bool(args.grids):
        raise InputError("Say what to clear: 'envlink cache clear --all', or 'envlink cache clear GRID' with a "
                         "store's key (as 'envlink cache' lists it) or a grid file's path; not both.")
    keys = None
    if args.grids:
        keys = []
        for what in args.grids:
            found = [s.key for s in stores if _matches(s, what)]
            if not found:
                listed = ", ".join(s.key[:12] for s in stores[:10]) or "none"
                raise InputError(f"No store in {str(root)!r} matches {what!r} (stores: {listed}); "
                                 "'envlink cache' lists them.")
            keys += found
    try:
        removed, freed = clear_stores(root, keys)
    except OSError as exc:
        from envlink.errors import EnvlinkError

        raise EnvlinkError(f"Cannot clear the store in {str(root)!r}: {exc.strerror or exc}.") from exc
    print(f"envlink cache: removed {removed} store{'' if removed == 1 else 's'} ({_size(freed)}) from {root}",
          file=sys.stderr)
    return 0


def _print_list(stores: list[Any], root: Path, limit: int, as_json: bool) -> None:
    total = sum(s.size for s in stores)
    if as_json:
        json.dump({"folder": str(root), "limit_bytes": limit, "total_bytes": total, "stores": [
            {"key": s.key, "grid": s.label, "variable": s.variable, "cells": s.cells, "empty_cells": s.empty_cells,
             "time_span": s.span, "segments": s.segments, "size_bytes": s.size, "last_use": s.last_use_text()}
            for s in stores]}, sys.stdout, indent=2)
        sys.stdout.write("\n")
        return
    print(f"cell-series store: {root}")
    if not stores:
        print("  (empty)")
    for s in stores:
        print(f"  {s.key[:12]}  {s.label}  [{s.variable}]")
        print(f"      {s.cells:,} cells (+{s.empty_cells:,} without data), {s.span}, {_size(s.size)} in "
              f"{s.segments} segment{'' if s.segments == 1 else 's'}, last used {s.last_use_text()}")
    print(f"total {_size(total)} of {_size(limit)} (ENVLINK_STORE_MAX)")
