"""``envlink report``: the HTML report from a fitted table, or from a project run's output folder."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from envlink.commands.fit import PARAM_OPTIONS as FIT_OPTIONS
from envlink.commands.fit import add_model_options, fit_table
from envlink.commands.options import command_line_text
from envlink.commands.outputs import (
    add_figure_options,
    check_figures_folder,
    covariate_names,
    egger_of,
    figure_options,
    write_model_outputs,
)
from envlink.errors import InputError

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["register", "run", "PARAM_OPTIONS"]

DESCRIPTION = """\
Write the self-contained HTML report (locating QA, covariates and extraction QA, the
model's tables, the bubble, forest, funnel and residual plots, the cautions) from

  - the output folder of `envlink run` or `envlink demo`: the enriched table and the
    settings recorded in its datapackage.json (effect columns, covariates, the
    [model] section) are read back and the model is fitted again; any model option
    given here replaces the recorded one; the checks the run made (window scan,
    imputed dates, permutation, small-study and spatial checks) are read back from
    its fit.json, not rerun;
  - a table with one effect and its sampling variance per row (an enriched table, or
    the output of `envlink effects`): give --effect and --variance, and the model's
    options as for `envlink fit`.

--figures also writes the model figures as PNG files."""

EPILOG = """\
examples:
  envlink demo --out vell && envlink report vell -o vell-report.html --label reef
  envlink report enriched.csv --effect effect --variance variance \\
      --moderators "sst_anom + C(method)" --label study_id -o report.html
  envlink report results/ -o report.html --forest-order precision --figures figures/

Exit codes: 0 written, 2 bad input (missing column or file, bad option), 1 the model
cannot be fitted."""


def register(subparsers: Any) -> None:
    """Add the ``report`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "report", help="the HTML report from a fitted table or a project run's outputs",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("source", metavar="SOURCE",
                   help="a project run's output folder, or a table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("-o", "--output", metavar="HTML", required=True, help="the report (.html)")
    p.add_argument("--force", action="store_true", help="overwrite HTML and the --figures PNGs if they exist")
    p.add_argument("--no-progress", action="store_true", help="accepted for every command; this one draws none")
    p.add_argument("--title", metavar="TEXT", default=None, help="the report's title")
    p.add_argument("--covariates", metavar="COLS", default=None,
                   help="comma-separated covariate columns to describe (default: those a project "
                        "run recorded, or every column C with C_flags and C_coverage beside it)")
    p.add_argument("--figures", metavar="DIR", default=None,
                   help="also write the model figures as PNG files into DIR (created if missing; "
                        "figures already there are replaced only with --force)")
    model = p.add_argument_group("the model (as for envlink fit)")
    add_model_options(model, project_defaults=True)
    add_figure_options(model)
    p.set_defaults(handler=run)


def _from_folder(folder: Path, args: argparse.Namespace) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The enriched table of a run's folder, with the settings its datapackage.json recorded."""
    from envlink.tables import read_table_as_written

    descriptor = folder / "datapackage.json"
    if not descriptor.is_file():
        raise InputError(
            f"{str(folder)!r} is a folder without datapackage.json: give the output folder of "
            "`envlink run` or `envlink demo` (with the csv export), or a table with --effect and "
            "--variance.")
    try:
        package = json.loads(descriptor.read_text(encoding="utf-8"))
        prov = package["envlink"]
        table = read_table_as_written(folder / package["resources"][0]["path"])
    except (OSError, ValueError, KeyError, IndexError, TypeError) as exc:
        raise InputError(f"Cannot read the run recorded in {str(descriptor)!r} ({exc!s}); "
                         "rerun the project to write it again.") from exc
    model, effects = prov.get("model") or {}, prov.get("effects") or {}
    if not model and args.effect is None:
        raise InputError(f"The run in {str(folder)!r} fitted no model ([model] was not in its "
                         "project file); give --effect, --variance and the model's options.")
    for key in ("moderators", "nested", "cluster", "method", "test"):
        if getattr(args, key) is None:
            setattr(args, key, model.get(key))
    args.effect = args.effect or effects.get("name", "effect")
    args.variance = args.variance or effects.get("variance", "variance")
    covs = prov.get("covariates") or {}
    extras = {
        "title": (prov.get("project") or {}).get("title") or package.get("title", "envlink report"),
        "covariates": list(covs), "windows_tried": max(1, len(covs)), "provenance": prov,
        "units": {c: v["units"] for c, v in covs.items() if isinstance(v, dict) and v.get("units")},
        "inference": _recorded_checks(folder, model.get("permutation")),
    }
    if args.label is None:
        args.label = args.nested or args.cluster
    return table, extras


def _recorded_checks(folder: Path, permutation: Any) -> Any:
    """The checks a project run recorded (its fit.json; else the permutation tests of its
    provenance), for the report's "What was corrected, and how" (None: none)."""
    from envlink.metareg.checks import Checks
    from envlink.metareg.permutation import PermutationResult
    from envlink.metareg.recorded import checks_from_result

    try:
        return checks_from_result(json.loads((folder / "fit.json").read_text(encoding="utf-8")))
    except FileNotFoundError:
        pass
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as exc:
        print(f"envlink report: note: the checks recorded in {str(folder / 'fit.json')!r} could not "
              f"be read ({exc!s}); the report leaves them out.", file=sys.stderr)
        return None
    if not isinstance(permutation, dict):
        return None
    try:
        return Checks(permutation=PermutationResult.from_dict(permutation))
    except (KeyError, TypeError, ValueError):  # recorded by another version: left out
        return None


def run(args: argparse.Namespace) -> int:
    """Run ``envlink report``; returns the exit code."""
    from envlink.tables import check_output_path, read_table_as_written

    out = check_output_path(args.output, force=args.force, suffixes=(".html",),
                            inputs={args.source: "SOURCE"})
    if args.figures is not None:
        check_figures_folder(args.figures, args.force)
    source = Path(args.source)
    if source.is_dir():
        table, extras = _from_folder(source, args)
    else:
        if args.effect is None or args.variance is None:
            raise InputError("A table needs --effect and --variance (its effect and sampling "
                             "variance columns); a project run's output folder needs neither.")
        table = read_table_as_written(source)
        extras = {"title": f"envlink report: {source.name}", "covariates": covariate_names(table)}
    if args.covariates is not None:
        extras["covariates"] = [c.strip() for c in args.covariates.split(",") if c.strip()]
    if args.title is not None:
        extras["title"] = args.title
    args.method = args.method or "REML"
    args.test = args.test or "z"
    model, data = fit_table(args, table)
    for note in model.notes_:
        print(f"envlink report: note: {command_line_text(note, PARAM_OPTIONS)}", file=sys.stderr)
    inference = extras.get("inference")
    if inference is not None and inference.bias is not None:  # recorded without its funnel's points
        from envlink.metareg.bias import with_funnel_points

        inference.bias = with_funnel_points(inference.bias, model)
    used = data[model.included_]
    egger = egger_of(used[args.effect].to_numpy(float), used[args.variance].to_numpy(float))
    write_model_outputs(model, data.assign(fit_included=model.included_), effect=args.effect,
                        variance=args.variance, report=out, figures=args.figures,
                        options=figure_options(args), command="report", egger=egger,
                        title=extras.pop("title"), report_options=extras)
    return 0


#: Python parameter -> option of ``envlink report``, for messages (envlink.commands.options).
PARAM_OPTIONS = {**FIT_OPTIONS, "force": "--force", "title": "--title", "covariates": "--covariates"}
