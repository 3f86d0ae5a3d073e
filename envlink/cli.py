"""The ``envlink`` command: parses arguments and dispatches to one module per command.

Exit codes: 0 success; 1 the run failed (grid values that cannot be read, an I/O
error reading a valid file, a model that cannot be fitted, an unexpected error); 2 bad
usage or bad input (a missing column, an invalid value in a table, a bad formula, a
file that is not what it claims); 128 + N stopped by signal N (SIGINT, SIGTERM and
SIGHUP alike, from the moment :func:`main` starts, while the command modules are
imported too: temporary files removed, previous outputs intact, one line on stderr; see
:mod:`envlink.commands.signals`). Only the named command's module is imported. Results go to files or stdout; messages go to
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
from envlink.core.util import pause_at_start_for_tests
from envlink.core.versions import VERSION
from envlink.errors import EnvlinkError, EnvlinkWarning, InputError

__all__ = ["main", "build_parser", "param_options", "COMMANDS"]

#: Command names, in the order ``envlink --help`` lists them. Each lives in
#: ``envlink.commands.<name>`` with ``register(subparsers)`` and ``run(args) -> int``.
COMMANDS = ("sites", "grid", "attach", "effects", "fit", "scan", "impute", "report", "run", "demo",
            "cache")


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """Build the top-level parser with every available sub-command, or only ``command``'s.

    Only the named command's module is imported when ``command`` is given (what
    :func:`main` does when its arguments name one), so a command starts without
    importing the others; ``envlink --help`` builds them all.
    """
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
    for name in COMMANDS if command is None else (command,):
        try:
            module = importlib.import_module(f"envlink.commands.{name}")
        except ModuleNotFoundError as exc:  # a command not built yet in this checkout
            if exc.name == f"envlink.commands.{name}":
                continue
            raise
        module.register(sub)
    return parser


def _command_named(argv: Sequence[str]) -> str | None:
    """The command the arguments name when nothing before it needs the whole parser, else None.

    Examples
    --------
    >>> _command_named(["--debug", "fit", "t.csv"]), _command_named(["--help", "fit"]), _command_named(["fi"])
    ('fit', None, None)
    """
    for word in argv:
        if word != "--debug":  # the only top-level option that neither prints nor exits
            return word if word in COMMANDS else None
    return None


def _parse(parser: argparse.ArgumentParser, argv: Sequence[str]) -> argparse.Namespace:
    """``parser.parse_args(argv)``, except that a command whose ``late_words`` default names a
    list of words (``envlink cache``) also takes the words that come after its options, so the
    command itself judges them (``cache clear --all GRID``)."""
    args, extra = parser.parse_known_args(argv)
    late = getattr(args, "late_words", None)
    if extra and late and not any(word.startswith("-") for word in extra):
        getattr(args, late).extend(extra)
    elif extra:
        parser.error(f"unrecognized arguments: {' '.join(extra)}")  # argparse's own message, exit 2
    return args


def param_options(command: str) -> ParamOptions:
    """The ``PARAM_OPTIONS`` of a command: its Python parameters -> its options."""
    module = sys.modules.get(f"envlink.commands.{command}")
    return getattr(module, "PARAM_OPTIONS", {})


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``envlink`` command line and return its exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    who = "envlink"
    try:
        # stop signals end the run cleanly from the first moment, imports included
        with stop_on_signals():
            pause_at_start_for_tests()
            parser = build_parser(_command_named(argv))
            try:
                args = _parse(parser, argv)
            except SystemExit as exc:  # argparse exits 2 on bad usage, 0 on --help
                return int(exc.code or 0)
            if not getattr(args, "command", None):
                parser.print_help(sys.stderr)
                return 2
            who = f"envlink {args.command}"
            return _dispatch(args)
    except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM / SIGHUP (envlink.commands.signals)
        signum = getattr(exc, "signum", signal.SIGINT)
        print(f"{who}: stopped by {signal_name(signum)}; previous outputs were "
              "left as they were and no partial output was left.", file=sys.stderr)
        return exit_code(signum)


def _dispatch(args: argparse.Namespace) -> int:
    """Run the parsed command; its errors become one message and an exit code."""
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
