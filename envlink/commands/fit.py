"""``envlink fit``: a mixed-effects meta-regression of a table's effects on moderators."""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from typing import TYPE_CHECKING, Any

from envlink.errors import EnvlinkError, InputError

if TYPE_CHECKING:  # numpy and pandas load only when the command runs
    import numpy as np
    import pandas as pd

__all__ = ["register", "run"]

DESCRIPTION = """\
Fit a mixed-effects meta-regression to a table with one effect size and its
sampling variance per row. Moderators are a formula over the table's columns
(numeric terms, C(col) for categories, C(col, Treatment('ref')) for a reference
level, a:b interactions, I(x**2) polynomials, bs(x, df=3) splines). The text
summary goes to stdout; --json writes the result as one JSON object. Rows with a
missing effect, variance or moderator are dropped and reported (rows counted from 1,
the first data row is row 1). Numbers written as text are read (decimal commas as in
12,5, unicode minus signs); a cell of a plain moderator that is not a number is an
error naming its row: write C(col) if the column is a category."""

EPILOG = """\
examples:
  envlink fit enriched.csv --effect yi --variance vi --moderators "sst_anom + depth_m"
  envlink fit enriched.parquet --effect yi --variance vi --nested study --cluster study \\
      --test knapp-hartung --json fit.json
  envlink fit enriched.csv --effect yi --variance vi --moderators dhw_max --permutations 999 --seed 1
  envlink fit enriched.csv --effect yi --variance vi --diagnostics --influence influence.csv

Exit codes: 0 fitted (read the notes for warnings), 2 bad input (missing column,
bad formula or option), 1 the model cannot be fitted. Methods: docs/methods.md."""

_METHODS = ("REML", "ML", "DL", "PM", "HE", "SJ")


def register(subparsers: Any) -> None:
    """Add the ``fit`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "fit", help="mixed-effects meta-regression of effects on moderators",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--effect", metavar="COL", required=True, help="column with the effect sizes")
    p.add_argument("--variance", metavar="COL", required=True,
                   help="column with the sampling variances (positive)")
    p.add_argument("--moderators", metavar="FORMULA", default=None,
                   help='right-hand side of a formula, e.g. "sst + C(method)"; default: none')
    p.add_argument("--method", default="REML", type=str.upper, choices=_METHODS,
                   help="tau² estimator (default REML; --nested needs REML or ML)")
    p.add_argument("--tau2", metavar="VALUE", type=float, default=None,
                   help="fix tau² at VALUE instead of estimating it (0: fixed-effect model)")
    p.add_argument("--test", default="z", choices=("z", "knapp-hartung"),
                   help="z tests, or Knapp-Hartung t and F tests (default z)")
    p.add_argument("--truncate-kh", action="store_true",
                   help="with knapp-hartung, use the scale max(1, q)")
    p.add_argument("--nested", metavar="COL",
                   help="study column: effects nested in studies (two variance components)")
    p.add_argument("--cluster", metavar="COL",
                   help="cluster column: CR2 robust standard errors, Satterthwaite df")
    p.add_argument("--level", type=float, default=0.95, help="confidence level (default 0.95)")
    p.add_argument("--permutations", metavar="N", type=int, default=0,
                   help="also run a permutation test of the moderators with N permutations")
    p.add_argument("--seed", metavar="S", type=int, default=None,
                   help="random seed of the permutation test (for reproducible p-values)")
    p.add_argument("--diagnostics", action="store_true",
                   help="also run the small-study diagnostics on the fitted effects: Egger's test, "
                        "trim-and-fill (L0) and the fail-safe N")
    p.add_argument("--influence", metavar="CSV", default=None,
                   help="write per-row influence to CSV: standardised residuals, Cook's distances "
                        "and leave-one-out estimates (one row per input row)")
    p.add_argument("--json", metavar="OUT", default=None,
                   help="write the result as JSON to OUT (a .json file; replaced if it exists)")
    p.set_defaults(handler=run)


def _model_table(df: pd.DataFrame, args: argparse.Namespace, variables: list[str]) -> pd.DataFrame:
    """The table with the model's columns read: numbers as float64, labels and categories as text.

    CSV cells are text as written, so numbers written as text (decimal commas,
    unicode minus signs) are read here; a plain moderator with a cell that is not
    a number is bad input naming the row, rather than a category per value.
    """
    from envlink.metareg.design import category_columns
    from envlink.tables import label_text, number_columns

    numbers: dict[str, np.ndarray] = {}
    for col, option in ((args.effect, "--effect"), (args.variance, "--variance")):
        numbers.update(number_columns(df, [col], numbers=[col], where=option))
    labels = [c for c in (args.nested, args.cluster) if c]
    categories = category_columns(args.moderators, variables)
    plain = [c for c in variables if c in df.columns and c not in categories and c not in labels
             and c not in numbers]
    numbers.update(number_columns(df, plain, where="--moderators",
                                  hint="write C({col}) in --moderators if the column is a category"))
    data = df.copy()
    for col, values in numbers.items():
        data[col] = values
    for col in dict.fromkeys([*variables, *labels]):
        if col in data.columns and col not in numbers:
            data[col] = label_text(data[col])  # white space is not a level; blank is missing
    return data


def _used_effects(model: Any, data: pd.DataFrame, args: argparse.Namespace) -> tuple[np.ndarray, np.ndarray]:
    """Effects and variances of the rows the model used (dropped rows left out)."""
    import numpy as np

    used = ~model.standardized_residuals()["dropped"].to_numpy(dtype=bool)
    y = data[args.effect].to_numpy(dtype=np.float64)[used]
    v = data[args.variance].to_numpy(dtype=np.float64)[used]
    return y, v


def _diagnostics(model: Any, data: pd.DataFrame, args: argparse.Namespace) -> dict[str, Any]:
    """Egger's test, trim-and-fill and the fail-safe N on the fitted effects; printed and returned."""
    from envlink.metareg.diagnostics import egger_test, fail_safe_n, trim_and_fill

    y, v = _used_effects(model, data, args)
    out: dict[str, Any] = {"k": int(y.size)}
    print(f"\nSmall-study diagnostics on the k = {y.size} fitted effects (no moderators):")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            eg = egger_test(y, v)
            out["egger"] = eg.to_dict()
            print(f"  Egger's test: intercept {eg.intercept:.4f} (se {eg.intercept_se:.4f}), "
                  f"t = {eg.statistic:.3f} on {eg.df} df, p = {eg.p_value:.4g}")
        except EnvlinkError as exc:
            out["egger"] = None
            print(f"  Egger's test: not run ({exc})")
        try:
            tf = trim_and_fill(y, v)
            summary = {k: val for k, val in tf.to_dict().items() if k not in ("y", "v", "filled")}
            out["trim_and_fill"] = summary
            print(f"  Trim-and-fill ({tf.estimator}, {tf.tau2_method}): k0 = {tf.k0} filled on the "
                  f"{tf.side}; pooled {tf.estimate:.4f} [{tf.ci_low:.4f}, {tf.ci_high:.4f}] "
                  f"(unadjusted {tf.estimate_unadjusted:.4f})")
        except EnvlinkError as exc:
            out["trim_and_fill"] = None
            print(f"  Trim-and-fill: not run ({exc})")
        try:
            n = fail_safe_n(y, v)
            out["fail_safe_n"] = int(n)
            print(f"  Fail-safe N (Rosenthal 1979, alpha 0.05): {int(n)}")
        except EnvlinkError as exc:
            out["fail_safe_n"] = None
            print(f"  Fail-safe N: not run ({exc})")
    return out


def _write_influence(model: Any, path: Any) -> None:
    """Standardised residuals, Cook's distances and leave-one-out fits, one row per input row."""
    import numpy as np
    import pandas as pd

    from envlink.tables import write_table

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # failed refits are reported in the model's notes
        resid = model.standardized_residuals()
        table = pd.DataFrame({
            "row": np.arange(1, len(resid) + 1),
            "dropped": resid["dropped"].to_numpy(dtype=bool),
            "residual": resid["residual"].to_numpy(),
            "standardized_residual": resid["z"].to_numpy(),
            "cooks_distance": model.cooks_distance().to_numpy(),
        })
        loo = model.leave_one_out().drop(columns="dropped", errors="ignore")
    for col in loo.columns:
        table[f"loo_{col}"] = loo[col].to_numpy()
    write_table(table, path, force=True)
    print(f"envlink fit: influence of {int((~table['dropped']).sum())} rows -> {path}", file=sys.stderr)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink fit``; returns the exit code."""
    from envlink._util import atomic_path
    from envlink.metareg.design import formula_variables
    from envlink.metareg.model import MetaRegression
    from envlink.tables import check_output_path, read_table_as_written, require_columns

    if not 0 < args.level < 1:
        raise InputError(f"--level must be between 0 and 1; got {args.level}.")
    if args.permutations < 0:
        raise InputError(f"--permutations must be 0 or more; got {args.permutations}.")
    # the JSON result replaces an existing file, but a path that cannot be written is
    # found before the table is read and the model fitted
    out = check_output_path(args.json, force=True, suffixes=(".json",)) if args.json else None
    influence_out = (check_output_path(args.influence, force=True, suffixes=(".csv",))
                     if args.influence else None)
    variables = formula_variables(args.moderators)
    df = read_table_as_written(args.table)
    require_columns(df, [args.effect, args.variance, args.nested, args.cluster])
    data = _model_table(df, args, variables)
    model = MetaRegression(
        method=args.method, test=args.test, tau2=args.tau2, moderators=args.moderators,
        nested=args.nested, cluster=args.cluster, truncate_kh=args.truncate_kh, level=args.level,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # every warning is in the result's notes
        model.fit(data, effect=args.effect, variance=args.variance)
        result = model.to_dict()
        perm = None
        if args.permutations:
            perm = model.permutation_test(args.permutations, seed=args.seed).to_dict()
            result = model.to_dict()
    print(model.summary())
    if perm is not None:
        print(f"\nPermutation test ({perm['n_permutations']} permutations, seed {perm['seed']}):")
        print(f"  Q_M p = {perm['Q_M_p']:.4f}")
        for c in perm["coefficients"]:
            print(f"  {c['term']}: p = {c['p']:.4f}")
        result["permutation"] = perm
    if args.diagnostics:
        result["diagnostics"] = _diagnostics(model, data, args)
    if influence_out is not None:
        _write_influence(model, influence_out)
    for note in result["warnings"]:
        print(f"envlink fit: note: {note}", file=sys.stderr)
    if out is not None:
        try:
            with atomic_path(out) as tmp:
                tmp.write_text(json.dumps(result, indent=2, allow_nan=False) + "\n", encoding="utf-8")
        except OSError as exc:
            raise EnvlinkError(f"Cannot write {str(out)!r}: {exc.strerror or exc}.") from exc
    return 0
