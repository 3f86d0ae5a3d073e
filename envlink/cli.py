"""The ``envlink`` command: parses arguments and dispatches to one module per command.

Exit codes: 0 success; 1 the run failed (grid values that cannot be read, an I/O
error reading a valid file, a model that cannot be fitted, an unexpected error); 2 bad
usage or bad input (a missing column, an invalid value in a table, a bad formula, a
file that is not what it claims); 128 + N stopped by signal N (SIGINT, SIGTERM and
SIGHUP alike: temporary files removed, previous outputs intact; see
:mod:`envlink.commands.signals`). Results go to files or stdout; messages go to
stderr, the first line naming the row, field, file or key. No traceback reaches a
user unless ``--debug`` or the environment variable ``ENVLINK_DEBUG=1`` asks for one;
the warnings of the libraries envlink uses are shown only then too (envlink's own
warnings say what matters). Errors and warnings name the command's options where the library names Python
parameters (each command's ``PARAM_OPTIONS``, see :mod:`envlink.commands.options`).
"""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
import traceback
import warnings
from collections.abc import Sequence

from envlink.commands.options import ParamOptions, command_line_message, command_line_text
from envlink.commands.signals import exit_code, signal_name, stop_on_signals
from envlink.core.versions import VERSION
from envlink.errors import EnvlinkError, EnvlinkWarning, InputError

__all__ = ["main", "build_parser", "param_options", "COMMANDS"]

#: Command names, in the order ``envlink --help`` lists them. Each lives in
#: ``envlink.commands.<name>`` with ``register(subparsers)`` and ``run(args) -> int``.
COMMANDS = ("sites", "grid", "attach", "effects", "fit", "scan", "impute", "report", "run", "demo",
            "cache")


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
    parser.add_argument("--version", action="version", version=f"envlink {VERSION}")
    parser.add_argument(
        "--debug", action="store_true", help="show a full traceback with every error (for bug reports)"
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


def param_options(command: str) -> ParamOptions:
    """The ``PARAM_OPTIONS`` of a command: its Python parameters -> its options."""
    module = sys.modules.get(f"envlink.commands.{command}")
    return getattr(module, "PARAM_OPTIONS", {})


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
    if getattr(args, "no_progress", False):  # every command takes --no-progress
        from envlink.core.progress import hide_progress

        hide_progress()
    options = param_options(args.command)
    plain_show = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):  # type: ignore[no-untyped-def]
        # envlink's own warnings are messages for the user, not for a programmer; a
        # library's warning (envlink turns what matters into its own) shows with --debug
        if issubclass(category, EnvlinkWarning) and not debug:
            print(f"envlink {args.command}: warning: {command_line_text(str(message), options)}",
                  file=sys.stderr)
        elif debug:
            plain_show(message, category, filename, lineno, file, line)

    warnings.showwarning = show
    try:
        with stop_on_signals():
            return int(args.handler(args) or 0)
    except InputError as exc:
        if debug:
            traceback.print_exc()
        print(f"envlink {args.command}: error: {command_line_message(exc, options)}", file=sys.stderr)
        return 2
    except EnvlinkError as exc:
        if debug:
            traceback.print_exc()
        print(f"envlink {args.command}: failed: {command_line_message(exc, options)}", file=sys.stderr)
        return 1
    except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM / SIGHUP (envlink.commands.signals)
        signum = getattr(exc, "signum", signal.SIGINT)
        print(f"envlink {args.command}: stopped by {signal_name(signum)}; previous outputs were "
              "left as they were and no partial output was left.", file=sys.stderr)
        return exit_code(signum)
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
        if getattr(args, "no_progress", False):
            from envlink.core.progress import hide_progress

            hide_progress(False)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
