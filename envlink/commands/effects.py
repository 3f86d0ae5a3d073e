"""``envlink effects``: effect sizes and sampling variances, per row or per group of raw records.

The kinds, their inputs (roles) and their options come from
:data:`envlink.effects.kinds.EFFECT_KINDS`: every role of every kind is an option
(``--events COL``, ``--mean1 COL``...), and ``--help`` lists each kind with the
options it needs. With ``--group COL`` the table holds raw records (one row per
observation) and :func:`envlink.effects.group_effects` computes one effect per group.
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from envlink.commands.outputs import choice
from envlink.effects.core import ZERO_CELL_RULES
from envlink.effects.kinds import EFFECT_KINDS
from envlink.errors import InputError

__all__ = ["register", "run", "PARAM_OPTIONS", "ROLES"]

#: Every role of every kind, in registry order: each is an option ``--ROLE COL``.
ROLES: tuple[str, ...] = tuple(dict.fromkeys(r for e in EFFECT_KINDS for r in e.info["roles"]))

#: The columns of raw records that a group-wise kind reads (``group_effects``).
_RECORD_OPTIONS = ("outcome", "x", "y")
#: A kind's keyword option -> the option that sets it.
_OPTION_FLAGS = {"correction": "--correction", "zero_cells": "--zero-cells",
                 "exact": "--approximate-j", "bias_correction": "--bias-correction"}


def _kinds_text() -> str:
    lines = []
    for e in EFFECT_KINDS:
        needs = " ".join(f"--{r} COL" for r in e.info["roles"])
        opts = " ".join(f"[{_OPTION_FLAGS[o]}]" for o in e.info["options"])
        lines.append(f"  {e.name}: {needs}" + (f" {opts}" if opts else ""))
    group = [e.name for e in EFFECT_KINDS if e.info.get("groupwise")]
    return ("kinds and the options each needs (from envlink's registry of effect kinds):\n"
            + "\n".join(lines)
            + "\n\nper group from raw records (--group COL): " + ", ".join(group)
            + ";\n  the proportions read --outcome COL (0/1, or True/False), fisher_z reads --x COL "
              "--y COL.")


DESCRIPTION = """\
Compute an effect size, its sampling variance and QA flags for every row of a table
(summary data: counts, means and SDs, correlations), or, with --group, one effect
per group of raw records. Every input row and column is kept in order and three
columns are added (--name, --variance-name, --flags-name; default effect, variance,
effect_flags). A row whose inputs cannot give a value gets empty cells and a flag
saying why; the run goes on. Kind names are read in any case, with - and _ alike
(Logit-Proportion). Formulas and sources: docs/methods.md, "Effect sizes"."""

EPILOG = _kinds_text() + """

examples:
  envlink effects surveys.csv --kind logit_proportion --events diseased --total examined \\
      -o effects.csv
  envlink effects trials.csv --kind log_odds_ratio --events1 sick_t --total1 n_t \\
      --events2 sick_c --total2 n_c --zero-cells all_rows -o effects.parquet
  envlink effects records.csv --group reef --kind logit_proportion --outcome lesion \\
      -o reef_effects.csv

Exit codes: 0 done (even with flagged rows), 2 bad input (missing column or option,
unknown kind), 1 unexpected failure."""


def register(subparsers: Any) -> None:
    """Add the ``effects`` sub-command to the ``envlink`` parser."""
    p = subparsers.add_parser(
        "effects", help="effect sizes and sampling variances, per row or per group of records",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("table", metavar="TABLE", help="input table (.csv/.tsv/.txt, .parquet, .xlsx)")
    p.add_argument("--kind", metavar="KIND", required=True, type=choice(EFFECT_KINDS),
                   help="effect kind: " + EFFECT_KINDS.help_text())
    p.add_argument("-o", "--output", metavar="OUT", required=True,
                   help="output table; the format follows the extension (.csv, .tsv, .parquet, .xlsx)")
    roles = p.add_argument_group("input columns (the kind's roles)")
    for role in ROLES:
        kinds = [e.name for e in EFFECT_KINDS if role in e.info["roles"]]
        roles.add_argument(f"--{role}", metavar="COL", default=None,
                           help=f"column of {role} (for {', '.join(kinds)})")
    rec = p.add_argument_group("raw records, one effect per group")
    rec.add_argument("--group", metavar="COL", help="column whose values define the groups (records with "
                     "an empty cell form one group flagged missing_group)")
    rec.add_argument("--outcome", metavar="COL", help="0/1 outcome column (proportion kinds)")
    rec.add_argument("--x", metavar="COL", help="first column of the correlation (fisher_z)")
    rec.add_argument("--y", metavar="COL", help="second column of the correlation (fisher_z)")
    opts = p.add_argument_group("options of some kinds")
    opts.add_argument("--correction", metavar="C", type=float, default=None,
                      help="continuity correction added to the cells of rows with a zero cell "
                           "(count kinds; default 0.5)")
    opts.add_argument("--zero-cells", metavar="RULE", default=None, type=choice(ZERO_CELL_RULES),
                      help=f"where the correction goes: {ZERO_CELL_RULES.help_text()} (count kinds)")
    opts.add_argument("--approximate-j", action="store_true",
                      help="hedges_g: the approximate small-sample factor J instead of the exact one")
    opts.add_argument("--bias-correction", action="store_true",
                      help="log_response_ratio: the second-order bias correction")
    p.add_argument("--name", default="effect", help="name of the effect column (default effect)")
    p.add_argument("--variance-name", default="variance",
                   help="name of the variance column (default variance)")
    p.add_argument("--flags-name", default="effect_flags",
                   help="name of the flag column (default effect_flags)")
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists (never TABLE)")
    p.add_argument("--no-progress", action="store_true", help="accepted for every command; this one draws none")
    p.set_defaults(handler=run)


def _given(args: argparse.Namespace, names: tuple[str, ...]) -> dict[str, Any]:
    return {n: getattr(args, n) for n in names if getattr(args, n) is not None}


def _kind_options(args: argparse.Namespace, takes: tuple[str, ...], kind: str) -> dict[str, Any]:
    """The kind's options as given; one it does not take is an error naming the option."""
    given = {"correction": args.correction, "zero_cells": args.zero_cells,
             "exact": False if args.approximate_j else None,
             "bias_correction": True if args.bias_correction else None}
    for key, value in given.items():
        if value is not None and key not in takes:
            raise InputError(f"{_OPTION_FLAGS[key]} does not apply to --kind {kind}; it takes "
                             + (", ".join(_OPTION_FLAGS[t] for t in takes) or "no options") + ".")
    return {k: v for k, v in given.items() if v is not None}


def _per_row(table: Any, args: argparse.Namespace) -> Any:
    from envlink.effects import effect_sizes

    entry = EFFECT_KINDS[args.kind]
    needed = entry.info["roles"]
    columns = _given(args, ROLES)
    lacking = [f"--{r}" for r in needed if r not in columns]
    extra = [f"--{r}" for r in columns if r not in needed]
    records = [f"--{r}" for r in _given(args, _RECORD_OPTIONS)]
    if lacking or extra or records:
        raise InputError(
            f"--kind {entry.name} takes the input columns " + " ".join(f"--{r} COL" for r in needed)
            + (f"; missing {', '.join(lacking)}" if lacking else "")
            + (f"; {', '.join(extra + records)} do not apply to it" if extra or records else "")
            + (" (--outcome, --x and --y need --group)" if records else "") + "."
        )
    kind: Any = entry.name  # a name of the registry, checked
    return effect_sizes(table, kind, name=args.name, variance_name=args.variance_name,
                        flags_name=args.flags_name,
                        **_kind_options(args, entry.info["options"], entry.name), **columns)


def _per_group(table: Any, args: argparse.Namespace) -> Any:
    from envlink.effects import group_effects
    from envlink.effects.kinds import kind_entry

    entry = kind_entry(args.kind, "envlink effects --group", groupwise=True)
    roles = [f"--{r}" for r in _given(args, ROLES)]
    if roles:
        raise InputError(f"With --group the table holds raw records: give --outcome (or --x and "
                         f"--y), not {', '.join(roles)}.")
    options = _kind_options(args, entry.info["options"] + ("zero_cells",), entry.name)
    kind: Any = entry.name
    return group_effects(table, args.group, kind, name=args.name,
                         variance_name=args.variance_name, flags_name=args.flags_name,
                         **_given(args, _RECORD_OPTIONS), **options)


def run(args: argparse.Namespace) -> int:
    """Run ``envlink effects``; returns the exit code."""
    from envlink.tables import check_output_path, read_table_as_written, write_table

    out = check_output_path(args.output, force=args.force, inputs={args.table: "TABLE"})
    table = read_table_as_written(args.table)
    result = _per_group(table, args) if args.group else _per_row(table, args)
    write_table(result, out, force=True)
    flags = result[args.flags_name].astype(str)
    n_flagged = int((flags != "").sum())
    n_value = int(result[args.name].notna().sum())
    what = "groups" if args.group else "rows"
    print(f"envlink effects: {EFFECT_KINDS[args.kind].name}: {n_value} of {len(result)} {what} with "
          f"an effect, {n_flagged} flagged -> {out}", file=sys.stderr)
    return 0


#: Python parameter -> option of ``envlink effects``, for messages (envlink.commands.options).
PARAM_OPTIONS = {
    "kind": "--kind", "group": "--group", "outcome": "--outcome", "x": "--x", "y": "--y",
    "correction": "--correction", "zero_cells": "--zero-cells",
    "exact": {False: "--approximate-j"}, "bias_correction": {True: "--bias-correction"},
    "name": "--name", "variance_name": "--variance-name", "flags_name": "--flags-name",
    "force": "--force", **{role: f"--{role}" for role in ROLES},
}
