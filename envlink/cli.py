"""The ``envlink`` command: parses arguments and dispatches to one module per command.

Exit codes: 0 success; 1 the run failed (a grid that cannot be decoded, a model that
cannot be fitted, an unexpected error); 2 bad usage or bad input. Results go to files
or stdout; messages go to stderr. No traceback reaches a user unless ``--debug`` or
the environment variable ``ENVLINK_DEBUG=1`` asks for one.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
import warnings
from collections.abc import Sequence

from envlink.errors import EnvlinkError, EnvlinkWarning, InputError

__all__ = ["main", "build_parser", "COMMANDS"]

#: Command names, in the order ``envlink --help`` lists them. Each lives in
#: ``envlink.commands.<name>`` with ``register(subparsers)`` and ``run(args) -> int``.
COMMANDS = ("sites", "grid", "attach", "fit", "run", "demo")


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("envlink")
    except PackageNotFoundError:  # running from a source tree without install
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    """Build the top-level parser with every available sub-command."""
    parser = argparse.ArgumentParser(
        prog="envlink",
        description=(
            "Attach gridded environmental covariates (sea-surface temperature, air "
            "temperature, rainfall, heat stress) to compiled field studies, matched to "
            "each study's place and time, and test them as moderators in a "
            "mixed-effects meta-regression."
        ),
        epilog="Run 'envlink COMMAND --help' for the options of one command.",
    )
    parser.add_argument("--version", action="version", version=f"envlink {_version()}")
    parser.add_argument(
        "--debug", action="store_true", help="show a full traceback on unexpected errors"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"envlink.commands.{name}")
        except ModuleNotFoundError as exc:  # a command not built yet in this checkout
            if exc.name == f"envlink.commands.{name}":
                continue
            raise
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``envlink`` command line and return its exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on bad usage, 0 on --help
        return int(exc.code or 0)
    if not getattr(args, "command", None):
        parser.print_help(sys.stderr)
        return 2
    debug = args.debug or os.environ.get("ENVLINK_DEBUG") == "1"
    plain_show = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):  # type: ignore[no-untyped-def]
        # envlink's own warnings are messages for the user, not for a programmer
        if issubclass(category, EnvlinkWarning) and not debug:
            print(f"envlink {args.command}: warning: {message}", file=sys.stderr)
        else:
            plain_show(message, category, filename, lineno, file, line)

    warnings.showwarning = show
    try:
        return int(args.handler(args) or 0)
    except InputError as exc:
        print(f"envlink {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except EnvlinkError as exc:
        print(f"envlink {args.command}: failed: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print(f"envlink {args.command}: interrupted; no partial output was left.", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # stdout was closed early (e.g. piped into `head`): not an error of envlink.
        # Point stdout at devnull so the interpreter's final flush stays quiet.
        devnull = os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(devnull, sys.stdout.fileno())
        except (AttributeError, OSError, ValueError):  # stdout is not a real file
            pass
        return 1
    except Exception as exc:  # noqa: BLE001 - last line of defence for users
        if debug:
            traceback.print_exc()
        print(
            f"envlink {args.command}: unexpected error ({type(exc).__name__}): {exc}\n"
            "This is a bug in envlink; rerun with --debug for the traceback and report it.",
            file=sys.stderr,
        )
        return 1
    finally:
        warnings.showwarning = plain_show


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
