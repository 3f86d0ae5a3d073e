"""The model checks of ``envlink fit``: small-study checks and spatial dependence.

Not a command of its own: :mod:`envlink.commands.fit` adds these options with
:func:`add_check_arguments` and calls :func:`run_checks` after the fit; the
:class:`~envlink.metareg.checks.Checks` it returns go into the printed summary and
the JSON (``diagnostics.small_study``, ``diagnostics.spatial``).
"""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING, Any

from envlink.effects.kinds import EFFECT_KINDS
from envlink.errors import EnvlinkError, InputError
from envlink.metareg.spatial_weights import SPATIAL_WEIGHTS

if TYPE_CHECKING:  # numpy and pandas load only when the command runs
    from envlink.metareg.checks import Checks

__all__ = ["add_check_arguments", "run_checks", "is_one_group", "CHECK_OPTIONS"]

#: Python parameter -> option, merged into ``envlink fit``'s PARAM_OPTIONS
CHECK_OPTIONS = {"weights": "--spatial", "kind": "--effect-kind"}


def add_check_arguments(p: argparse.ArgumentParser) -> None:
    """The options of the model checks."""
    p.add_argument("--diagnostics", action="store_true",
                   help="also run the small-study checks on the fitted model: an Egger-type test "
                        "with sqrt(variance) added to the model (moderators and nesting kept), "
                        "the fail-safe N with its null, trim-and-fill only without moderators")
    p.add_argument("--effect-kind", metavar="KIND", default=None,
                   help="the kind of the effects (e.g. logit_proportion), so the checks state "
                        "their cautions: one-group proportions give no fail-safe N")
    p.add_argument("--spatial", metavar="WEIGHTS", default=None,
                   help=f"also test the residuals for spatial dependence: Moran's I with "
                        f"{SPATIAL_WEIGHTS.help_text()} weights on great-circle distances "
                        "(needs site_lat and site_lon), and a correlogram")
    p.add_argument("--spatial-effect", action="store_true",
                   help="also refit with a spatial random effect (exponential correlation on "
                        "distance, range by REML); point sites only")


def is_one_group(kind: str | None) -> bool:
    """Whether an effect kind is a one-group proportion (its only inputs: events, total).

    Examples
    --------
    >>> is_one_group("logit_proportion"), is_one_group("log_odds_ratio"), is_one_group(None)
    (True, False, False)
    """
    if kind is None:
        return False
    return tuple(EFFECT_KINDS.parse(kind).entry.info["roles"]) == ("events", "total")


def _coords(data: Any) -> tuple[Any, Any]:
    import numpy as np
    import pandas as pd

    missing = [c for c in ("site_lat", "site_lon") if c not in data.columns]
    if missing:
        raise InputError(f"--spatial needs the columns {', '.join(missing)} (a table located by "
                         "'envlink sites' or enriched by 'envlink run').")
    return (pd.to_numeric(data["site_lat"], errors="coerce").to_numpy(np.float64),
            pd.to_numeric(data["site_lon"], errors="coerce").to_numpy(np.float64))


def run_checks(model: Any, data: Any, args: argparse.Namespace) -> Checks:
    """Run the checks asked for on the fitted model; the command prints and writes them."""
    from envlink.metareg.checks import Checks

    checks = Checks()
    if args.effect_kind is not None:
        EFFECT_KINDS.parse(args.effect_kind)
    if args.diagnostics:
        from envlink.metareg.bias import bias_checks

        kind = EFFECT_KINDS.parse(args.effect_kind).name if args.effect_kind else None
        null = ("effect 0 on the scale of --effect (unknown kind: give --effect-kind)"
                if kind is None else "effect 0 (no difference)")
        checks.bias = bias_checks(model, one_group_proportion=is_one_group(kind), null_effect=null)
    if args.spatial or args.spatial_effect:
        _spatial(model, data, args, checks)
    return checks


def _spatial(model: Any, data: Any, args: argparse.Namespace, checks: Checks) -> None:
    from envlink.metareg.spatial import correlogram, residual_moran
    from envlink.metareg.spatial_re import fit_spatial

    lat, lon = _coords(data)
    weights = args.spatial or "knn:6"
    checks.moran = residual_moran(model, lat, lon, weights=weights, n_permutations=999,
                                  seed=args.seed)
    z = model.standardized_residuals()
    ok = ~z["dropped"].to_numpy(dtype=bool)
    try:
        checks.correlogram = correlogram(z["z"].to_numpy()[ok], lat[ok], lon[ok], seed=args.seed,
                                         n_permutations=199)
    except EnvlinkError as exc:
        print(f"envlink fit: note: no correlogram: {exc}", file=sys.stderr)
    if args.spatial_effect:
        checks.spatial_effect = fit_spatial(model, lat, lon)
