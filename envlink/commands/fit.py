"""``envlink fit``: a mixed-effects meta-regression of a table's effects on moderators."""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from typing import TYPE_CHECKING, Any

from envlink.commands.checks import CHECK_OPTIONS, add_check_arguments, run_checks
from envlink.commands.options import command_line_text
from envlink.commands.outputs import (
    FIGURE_PARAM_OPTIONS,
    add_figure_options,
    check_figures_folder,
    choice,
    covariate_names,
    egger_of,
    figure_options,
    forms,
    write_model_outputs,
)
from envlink.errors import EnvlinkError, InputError
from envlink.metareg.shuffles import PERMUTATION_SCHEMES
from envlink.metareg.vocabulary import ESTIMATORS, TESTS, multilevel_names

if TYPE_CHECKING:  # numpy and pandas load only when the command runs
    import numpy as np
    import pandas as pd

__all__ = ["register", "run"]

DESCRIPTION = """\
Fit a mixed-effects meta-regression to a table with one effect size and its
sampling variance per row. Moderators are a formula over the table's columns
(numeric terms, C(col) for categories, C(col, Treatment('ref')) for a reference
level, a:b interactions, I(x**2) polynomials, bs(x, df=3) splines). A column of text
is fitted as a category (one coefficient per level against the first level), as
C(col) would be. The text summary goes to stdout; --json writes the result as one
JSON object (its sections: docs/methods.md, "Result fields"); --report writes the
HTML report of the fit and --figures the model figures as PNG files. Rows rejected
by locate (locate_status) and rows with a missing or non-finite effect, variance,
moderator or label are left out and reported (rows counted from 1, the first data
row is row 1). Numbers written as text are read (decimal commas as in 12,5, unicode
minus signs); in a column of numbers, a cell that is not a number is an error naming
its row: write C(col) if the column is a category. Method and test names are read
in any case, with - and _ alike (reml, Knapp_Hartung, dersimonian-laird)."""

EPILOG = """\
examples:
  envlink fit enriched.csv --effect effect --variance variance --moderators "sst_anom + depth_m"
  envlink fit enriched.parquet --effect effect --variance variance --nested study_id \\
      --cluster study_id --test knapp-hartung --json fit.json
  envlink fit enriched.csv --effect effect --variance variance --moderators dhw_max \\
      --permutations 999 --seed 1
  envlink fit enriched.csv --effect effect --variance variance --moderators "sst_anom + C(method)" \\
      --report fit.html --label study_id --figures figures/
  envlink fit enriched.csv --effect effect --variance variance --moderators sst_anom \\
      --nested study_id --diagnostics --effect-kind logit_proportion --spatial knn:6 \\
      --influence influence.csv

--json and --influence never replace TABLE, and replace an existing file only with
--force; they are written together, atomically.

Exit codes: 0 fitted (read the notes for warnings), 2 bad input (missing column, an
invalid value such as a zero, negative or infinite variance or an infinite effect,
a bad formula or option, too few usable rows for the model's coefficients, an output
that exists or is TABLE), 1 the model cannot be fitted, 128 + N stopped by signal N. Methods: docs/methods.md."""


def add_model_options(p: argparse.ArgumentParser, *, project_defaults: bool = False) -> None:
    """The model's options (shared with ``envlink report``).

    With ``project_defaults`` nothing is required and ``--method`` / ``--test`` default
    to None: ``envlink report`` takes what a project run recorded for what is not given.
    """
    req = not project_defaults
    p.add_argument("--effect", metavar="COL", required=req, help="column with the effect sizes")
    p.add_argument("--variance", metavar="COL", required=req,
                   help="column with the sampling variances (positive)")
    p.add_argument("--moderators", metavar="FORMULA", default=None,
                   help='right-hand side of a formula, e.g. "sst + C(method)"; default: none')
    p.add_argument("--method", metavar="METHOD", default=None if project_defaults else "REML",
                   type=choice(ESTIMATORS),
                   help=f"tau² estimator: {forms(ESTIMATORS)}; any case (default REML; "
                        f"--nested needs {multilevel_names()})")
    p.add_argument("--tau2", metavar="VALUE", type=float, default=None,
                   help="fix tau² at VALUE instead of estimating it (0: fixed-effect model)")
    p.add_argument("--test", metavar="TEST", default=None if project_defaults else "z",
                   type=choice(TESTS),
                   help=f"{forms(TESTS)}: normal-theory z tests, or Knapp-Hartung t and F tests "
                        "with k - p df (default z)")
    p.add_argument("--truncate-kh", action="store_true",
                   help="with knapp-hartung, use the scale max(1, q)")
    p.add_argument("--nested", metavar="COL",
                   help="study column: effects nested in studies (two variance components)")
    p.add_argument("--cluster", metavar="COL",
                   help="cluster column: CR2 robust standard errors, Satterthwaite df")
    p.add_argument("--level", type=float, default=0.95, help="confidence level (default 0.95)")


def register(subparsers: Any) -> None:
    """Add the ``fit`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "fit", help="mixed-effects meta-regression of effects on moderators",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx; with --scheduler: Parquet "
                        "or a Zarr store only)")
    add_model_options(p)
    p.add_argument("--permutations", metavar="N", type=int, default=0,
                   help="also run permutation tests with N permutations: one p per moderator term "
                        "(its columns permuted, the others kept) and one for Q_M (all together)")
    p.add_argument("--permute", metavar="SCHEME", default=None, type=choice(PERMUTATION_SCHEMES),
                   help=f"how rows are permuted: {forms(PERMUTATION_SCHEMES)} (default within with "
                        "--nested, else rows)")
    p.add_argument("--seed", metavar="S", type=int, default=None,
                   help="random seed of the permutation tests (for reproducible p-values)")
    p.add_argument("--no-progress", action="store_true",
                   help="hide the progress bars of the permutation tests and influence (and their lines in a log)")
    add_check_arguments(p)
    p.add_argument("--influence", metavar="CSV", default=None,
                   help="write per-row influence to CSV: standardised residuals, Cook's distances "
                        "and leave-one-out estimates (one row per input row)")
    p.add_argument("--json", metavar="OUT", default=None,
                   help="write the result as JSON to OUT (a .json file; an existing one is replaced only with --force)")
    p.add_argument("--report", metavar="HTML", default=None,
                   help="also write the HTML report of the fit to HTML (the model's tables, the "
                        "bubble, forest, funnel and residual plots)")
    p.add_argument("--figures", metavar="DIR", default=None,
                   help="also write the model figures as PNG files into DIR (bubble.png, "
                        "forest.png, funnel.png, residuals.png; created if missing; figures "
                        "already there are replaced only with --force)")
    add_figure_options(p)
    p.add_argument("--force", action="store_true",
                   help="replace the --json, --influence and --report files and the --figures PNGs if "
                        "they exist (never TABLE)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="reduce each iteration's sums on a dask.distributed cluster (e.g. "
                        "tcp://10.0.0.5:8786); TABLE must then be Parquet (a file, or a folder or "
                        "glob of files) or a Zarr store of 1-D arrays, not a CSV or workbook; "
                        "moderators a plain sum of numeric columns (docs/scaling.md)")
    p.set_defaults(handler=run)


def _used_effects(model: Any, data: pd.DataFrame, args: argparse.Namespace) -> tuple[np.ndarray, np.ndarray]:
    """Effects and variances of the rows the model used (``included_``)."""
    import numpy as np

    used = np.asarray(model.included_, dtype=bool)
    y = data[args.effect].to_numpy(dtype=np.float64)[used]
    v = data[args.variance].to_numpy(dtype=np.float64)[used]
    return y, v


def _write_influence(model: Any, path: Any, labels: pd.Series | None) -> None:
    """Standardised residuals, Cook's distances and leave-one-out fits, one row per input row.

    Each row carries its row number (from 1) and, with ``labels``, its label column.
    """
    import numpy as np
    import pandas as pd

    from envlink.errors import EnvlinkWarning
    from envlink.tables import write_table

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")  # envlink's (failed refits, undefined residuals) become notes
        resid = model.standardized_residuals()
        table = pd.DataFrame({"row": np.arange(1, len(resid) + 1)})
        if labels is not None:
            table[labels.name] = labels.to_numpy()
        table["dropped"] = resid["dropped"].to_numpy(dtype=bool)
        table["residual"] = resid["residual"].to_numpy()
        table["standardized_residual"] = resid["z"].to_numpy()
        table["cooks_distance"] = model.cooks_distance().to_numpy()
        loo = model.leave_one_out().drop(columns="dropped", errors="ignore")
    for col in loo.columns:
        table[f"loo_{col}"] = loo[col].to_numpy()
    for w in caught:
        if issubclass(w.category, EnvlinkWarning):
            print(f"envlink fit: note: {command_line_text(str(w.message), PARAM_OPTIONS)}",
                  file=sys.stderr)
    write_table(table, path, force=True)
    print(f"envlink fit: influence of {int((~table['dropped']).sum())} rows -> {path}", file=sys.stderr)


#: options that need the table's rows in memory (not the big-table fast path or --scheduler)
_ROW_OPTIONS = ("nested", "cluster", "permutations", "diagnostics", "influence", "spatial",
                "spatial_effect", "report", "figures")


def _big_numeric_design(args: argparse.Namespace) -> Any:
    """A big table of plain numbers, read straight into arrays (same fit; None: the ordinary way)."""
    if any(getattr(args, option, None) for option in _ROW_OPTIONS):
        return None
    from envlink.metareg.columns import design_from_table_file

    return design_from_table_file(args.table, effect=args.effect, variance=args.variance,
                                  moderators=args.moderators)


def _cluster_design(args: argparse.Namespace) -> Any:
    """The design over the partitions of TABLE, read by the cluster's workers (``--scheduler``)."""
    for option in _ROW_OPTIONS:
        if getattr(args, option, None):
            name = option.replace("_", "-")
            raise InputError(f"--{name} is not available with --scheduler; fit in memory.")
    from envlink.metareg.chunked import design_from_source

    return design_from_source(args.table, effect=args.effect, variance=args.variance,
                              moderators=args.moderators)


def _fit(args: argparse.Namespace, frame: Any) -> Any:
    """The model the options describe, fitted to a model frame or a design (notes kept, no warnings)."""
    from envlink.metareg.model import MetaRegression

    model = MetaRegression(
        method=args.method, test=args.test, tau2=args.tau2, moderators=args.moderators,
        nested=args.nested, cluster=args.cluster, truncate_kh=args.truncate_kh, level=args.level,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # every warning is in the result's notes
        model.fit(frame)
    return model


def _check_model_options(args: argparse.Namespace) -> None:
    from envlink.metareg.formula import formula_variables

    if not 0 < args.level < 1:
        raise InputError(f"--level must be between 0 and 1; got {args.level}.")
    formula_variables(args.moderators)  # a bad formula is found before the table is read


def fit_table(args: argparse.Namespace, table: pd.DataFrame | None = None) -> tuple[Any, pd.DataFrame]:
    """Read the table (or take ``table``) and fit the model the options describe.

    Returns the model and the table, whose model columns hold numbers where the cells
    were numbers written as text. Warnings are kept quiet: every one is in the
    model's notes.
    """
    from envlink.metareg.frame import model_frame, read_model_columns
    from envlink.tables import read_table_as_written, require_columns

    _check_model_options(args)
    df = read_table_as_written(args.table) if table is None else table
    require_columns(df, [args.effect, args.variance, args.nested, args.cluster,
                         getattr(args, "label", None), getattr(args, "bubble", None)])
    data = read_model_columns(
        df, effect=args.effect, variance=args.variance, moderators=args.moderators,
        nested=args.nested, cluster=args.cluster,
        where={"effect": "--effect", "variance": "--variance", "moderators": "--moderators"},
        hint="write C({col}) in --moderators if the column is a category",
    )
    frame = model_frame(data, effect=args.effect, variance=args.variance,
                        moderators=args.moderators, nested=args.nested, cluster=args.cluster,
                        skip_rejected=True)  # the rule of the project run (fit_included)
    return _fit(args, frame), data


def _fit_without_rows(args: argparse.Namespace) -> Any:
    """The model fitted on a cluster (``--scheduler``) or, for a big table of plain numbers,
    from arrays read straight from the file; None when the table must be read as rows."""
    _check_model_options(args)
    on_cluster = getattr(args, "scheduler", None) is not None
    design = _cluster_design(args) if on_cluster else _big_numeric_design(args)
    return None if design is None else _fit(args, design)


def _check_outputs(args: argparse.Namespace) -> dict[str, Any]:
    """Every output path, checked before the table is read and the model fitted."""
    from envlink.tables import check_output_path

    if args.permutations < 0:
        raise InputError(f"--permutations must be 0 or more; got {args.permutations}.")
    out: dict[str, Any] = {"json": None, "influence": None, "report": None}
    inputs = {args.table: "TABLE"}  # never replaced, even with --force
    for key, suffixes in (("json", (".json",)), ("influence", (".csv",)), ("report", (".html",))):
        if getattr(args, key):
            out[key] = check_output_path(getattr(args, key), force=args.force, suffixes=suffixes,
                                         inputs=inputs)
    if args.figures is not None:
        check_figures_folder(args.figures, args.force)
    return out


def _permutations(model: Any, args: argparse.Namespace) -> Any:
    """The permutation tests of the fitted model (one p per term, one for Q_M)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the result's notes say what matters
        return model.permutation_test(args.permutations, seed=args.seed, scheme=args.permute,
                                      progress=None)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink fit``; returns the exit code."""
    from envlink.core.cluster import on_cluster

    if getattr(args, "scheduler", None) is not None:  # before the cluster is touched
        from envlink.metareg.chunked import check_cluster_source

        check_cluster_source(args.table, reader="--scheduler reads TABLE", otherwise="fit without --scheduler")
    with on_cluster(getattr(args, "scheduler", None)):
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    outs = _check_outputs(args)
    model = _fit_without_rows(args)
    if model is not None:  # none of the options that need the rows was given (_ROW_OPTIONS)
        return _finish(args, model, run_checks(model, None, args), outs, None)
    model, data = fit_table(args)
    checks = run_checks(model, data, args)  # --diagnostics, --spatial, --spatial-effect
    if args.permutations:
        checks.permutation = _permutations(model, args)
    return _finish(args, model, checks, outs, data)


def _finish(args: argparse.Namespace, model: Any, checks: Any, outs: dict[str, Any],
            data: pd.DataFrame | None) -> int:
    """Print the summary and notes; write --json and --influence together, then the figures."""
    from envlink.core.util import atomic_group, atomic_path
    from envlink.metareg.summary import FitSummary, pooled_interval

    result = model.to_dict()
    if args.prediction != "tests":
        result["heterogeneity"]["pooled_prediction_interval"] = pooled_interval(model, args.prediction)
    result = checks.add_to(result)  # each check in its section (envlink.metareg.checks)
    summary = FitSummary(result, model, extra=checks.section_lines())
    print(command_line_text(str(summary), PARAM_OPTIONS))
    for note in result["warnings"]:
        print(f"envlink fit: note: {command_line_text(note, PARAM_OPTIONS)}", file=sys.stderr)
    try:
        with atomic_group():  # --influence and --json land together
            if outs["influence"] is not None and data is not None:
                label = args.label or args.nested or args.cluster
                _write_influence(model, outs["influence"], data[label] if label else None)
            if outs["json"] is not None:
                with atomic_path(outs["json"]) as tmp:
                    tmp.write_text(json.dumps(result, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    except OSError as exc:
        target = outs["json"] or outs["influence"]
        raise EnvlinkError(f"Cannot write {str(target)!r}: {exc.strerror or exc}.") from exc
    if (outs["report"] is not None or args.figures is not None) and data is not None:
        y, v = _used_effects(model, data, args)
        write_model_outputs(model, data.assign(fit_included=model.included_), effect=args.effect,
                            variance=args.variance, report=outs["report"], figures=args.figures,
                            options=figure_options(args), command="fit", egger=egger_of(y, v),
                            title=f"envlink fit: {args.table}",
                            report_options={"covariates": covariate_names(data), "inference": checks})
    return 0


#: Python parameter -> option of ``envlink fit``, for messages (envlink.commands.options).
PARAM_OPTIONS = {
    "effect": "--effect", "variance": "--variance", "moderators": "--moderators",
    "method": "--method", "tau2": "--tau2", "test": "--test", "truncate_kh": "--truncate-kh",
    "nested": "--nested", "cluster": "--cluster", "level": "--level",
    "n_permutations": "--permutations", "seed": "--seed", "scheme": "--permute", "force": "--force",
    **FIGURE_PARAM_OPTIONS, **CHECK_OPTIONS, "scheduler": "--scheduler",
}
