"""The model outputs that ``envlink fit`` and ``envlink report`` share: report, figures, their options.

:func:`add_figure_options` adds ``--label``, ``--forest-order``, ``--bubble`` and
``--prediction`` to a command; :func:`write_model_outputs` writes the HTML report
(``--report``) and the PNG figures (``--figures``) of a fitted model. The names these
options accept come from their registries (:data:`~envlink.report.vocabulary.FOREST_ORDERS`,
:data:`~envlink.metareg.vocabulary.PREDICTION_INTERVALS`).
"""

from __future__ import annotations

import argparse
import re
import sys
from typing import TYPE_CHECKING, Any

from envlink.errors import InputError
from envlink.metareg.vocabulary import PREDICTION_INTERVALS
from envlink.report.vocabulary import FOREST_ORDERS

if TYPE_CHECKING:
    import pandas as pd

    from envlink.core.registry import Registry

__all__ = ["check_figures_folder", "choice", "forms", "add_figure_options", "figure_options", "covariate_names", "egger_of",
           "write_model_outputs", "FIGURE_PARAM_OPTIONS"]


#: the Python words of a parameter message ("The 'method' parameter of MetaRegression "), left
#: out on the command line, where argparse names the option instead
_PYTHON_PARAM = re.compile(r"^The '[^']+' parameter of [\w.]+ (?=must be )")


def choice(registry: Registry[Any]) -> Any:
    """An argparse type reading a name of ``registry`` (its spelling policy) as its canonical label."""

    def read(text: str) -> str:
        try:
            return registry.parse(text).label()
        except InputError as exc:  # argparse names the option: "argument --method: must be ..."
            raise argparse.ArgumentTypeError(_PYTHON_PARAM.sub("", str(exc), count=1)) from None

    read.__name__ = registry.vocabulary  # argparse names the type in its messages
    return read


def forms(registry: Registry[Any]) -> str:
    """Names and aliases for --help: ``REML (restricted-maximum-likelihood), ...``."""
    return ", ".join(e.name + (f" ({', '.join(e.aliases)})" if e.aliases else "") for e in registry)


def add_figure_options(p: argparse.ArgumentParser) -> None:
    """The options that shape the model figures."""
    p.add_argument("--label", metavar="COL", default=None,
                   help="column labelling the forest plot's rows, e.g. a study, site or year "
                        "(default: the row number)")
    p.add_argument("--forest-order", metavar="ORDER", default="effect", type=choice(FOREST_ORDERS),
                   help=f"row order of the forest plot: {forms(FOREST_ORDERS)} (default effect)")
    p.add_argument("--bubble", metavar="COL", default=None,
                   help="numeric column for the bubble plot (default: the first numeric term of "
                        "the moderators, in formula order)")
    p.add_argument("--prediction", metavar="RULE", default="tests", type=choice(PREDICTION_INTERVALS),
                   help=f"prediction interval: {forms(PREDICTION_INTERVALS)}; tests (default) "
                        "uses the distribution of the coefficient tests, riley t with k - p - 1 df")


def figure_options(args: argparse.Namespace) -> dict[str, Any]:
    """The figure options of :func:`envlink.report.model_figures` from the parsed arguments."""
    return {"label": args.label, "forest_order": args.forest_order, "moderator": args.bubble,
            "prediction": args.prediction}


def covariate_names(table: pd.DataFrame) -> list[str]:
    """Columns that carry the covariate QA columns of ``envlink attach`` (``C_flags``, ``C_coverage``)."""
    cols = set(map(str, table.columns))
    return [c for c in map(str, table.columns) if {f"{c}_flags", f"{c}_coverage"} <= cols]


def egger_of(y: Any, v: Any) -> Any:
    """Egger's test of the fitted effects, or None where it cannot be run (too few effects)."""
    import warnings

    from envlink.errors import EnvlinkError
    from envlink.metareg.diagnostics import egger_test

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return egger_test(y, v)
    except EnvlinkError:
        return None


def check_figures_folder(folder: str, force: bool) -> None:
    """``--figures DIR``, checked before any work: a folder (or a new path), whose figure
    files are replaced only with ``--force``.

    Examples
    --------
    >>> import tempfile
    >>> check_figures_folder(tempfile.mkdtemp(), force=False)
    """
    from pathlib import Path

    from envlink.report.figures import FIGURE_FILES

    path = Path(folder)
    if path.exists() and not path.is_dir():
        raise InputError(f"--figures {folder!r} is a file; give a folder for the PNG figures "
                         "(it is created when missing).")
    there = [name for name in FIGURE_FILES if (path / name).exists()] if path.is_dir() else []
    if there and not force:
        raise InputError(f"--figures folder {folder!r} already holds {', '.join(there)}; add --force to "
                         "replace the figures, or give another folder.")


def write_model_outputs(model: Any, table: pd.DataFrame, *, effect: str, variance: str,
                        report: Any, figures: Any, options: dict[str, Any], command: str,
                        title: str = "envlink report", egger: Any = None,
                        report_options: dict[str, Any] | None = None) -> None:
    """Write the HTML report and / or the PNG figures of a fitted model; say where on stderr."""
    from envlink.report import write_figures, write_report

    if figures is not None:
        items = write_figures(figures, table, model, effect=effect, variance=variance, egger=egger,
                              **options)
        for item in items:
            if item.path is None:
                print(f"envlink {command}: note: {item.caption}", file=sys.stderr)
        done = [item.path.name for item in items if item.path is not None]
        print(f"envlink {command}: figures {', '.join(done) or '(none)'} -> {figures}", file=sys.stderr)
    if report is not None:
        write_report(report, table=table, fit=model, effect=effect, variance=variance, egger=egger,
                     title=title, **options, **(report_options or {}))
        print(f"envlink {command}: report -> {report}", file=sys.stderr)


#: Python parameter -> option, for the figure options (envlink.commands.options).
FIGURE_PARAM_OPTIONS = {"label": "--label", "forest_order": "--forest-order", "moderator": "--bubble",
                        "prediction": "--prediction"}
