"""The checks of a fit read back from its JSON result (``fit.json``), for a report drawn later.

A project run writes every check that ran into the sections of ``fit.json``
(:meth:`envlink.metareg.checks.Checks.add_to`). ``envlink report RUN_FOLDER`` refits
the model from the enriched table, which is cheap, but does not rerun a window scan,
imputed dates or permutations, which are not: :func:`checks_from_result` rebuilds their
result objects from what the run recorded (a scan's permutation maxima included, for its
null-distribution figure), so the report states exactly what the run's p-values were
corrected for. The points of the small-study checks' residual funnel are not recorded:
they come from the refitted model (:func:`envlink.metareg.bias.with_funnel_points`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from envlink.metareg.checks import Checks

__all__ = ["checks_from_result"]


def _float(x: Any) -> float:
    return np.nan if x is None else float(x)


def _frame(rows: list[dict[str, Any]]) -> pd.DataFrame:
    """Records to a frame with JSON's nulls as NaN in numeric columns."""
    t = pd.DataFrame.from_records(rows)
    for c in t.columns:
        if t[c].map(lambda v: v is None or isinstance(v, int | float)).all():
            t[c] = t[c].map(_float).astype(np.float64) if t[c].isna().any() else t[c]
    return t


def _scan(d: dict[str, Any]) -> Any:
    from envlink.metareg.scan import ScanResult

    table = _frame(d["windows"]).set_index("window")
    table.index.name = None
    return ScanResult(table, d["best_window"], d.get("family_p"), int(d["n_windows"]),
                      int(d["n_permutations"]), d.get("seed"), d["scheme"], d["method"], d["test"],
                      d.get("moderators"), d.get("nested"), int(d["k"]), d["statistic"],
                      maxima=np.array([_float(m) for m in d.get("null_maxima", [])], dtype=np.float64),
                      notes=list(d.get("notes", [])))


def _imputation(d: dict[str, Any]) -> Any:
    from envlink.metareg.pooling import ImputationResult, PooledResult

    pooled = d["pooled"]
    table = _frame(pooled["coefficients"])
    if "df" in table.columns:  # JSON writes an infinite df (no between-draw variance) as null
        table["df"] = table["df"].astype(np.float64).fillna(np.inf)
    pr = PooledResult(table, int(pooled["m"]),
                      _float(pooled.get("df_complete")) if pooled.get("df_complete") is not None
                      else np.inf)
    return ImputationResult(pr, int(d["draws"]), d.get("seed"), dict(d["rows_per_rule"]),
                            pd.DataFrame.from_records(d.get("per_draw", [])), d["model"],
                            list(d.get("notes", [])))


def _bias(d: dict[str, Any]) -> Any:
    from envlink.metareg.bias import BiasChecks, SmallStudyTest

    s = d.get("small_study_test")
    test = None if s is None else SmallStudyTest(
        _float(s["estimate"]), _float(s["se"]), _float(s["statistic"]), _float(s["p"]),
        s.get("df"), s["test"], int(s["k"]), s["model"], dict(s.get("coefficients_with_the_term", {})))
    return BiasChecks(d["model"], test, np.zeros(0), np.zeros(0), d.get("fail_safe_n"),
                      d.get("fail_safe_null"), d.get("trim_and_fill"), list(d.get("cautions", [])),
                      list(d.get("notes", [])))


def _spatial(d: dict[str, Any], checks: Checks) -> None:
    from envlink.metareg.spatial import Correlogram, MoranResult, SharedCells
    from envlink.metareg.spatial_re import SpatialFit

    if (m := d.get("moran")) is not None:
        checks.moran = MoranResult(
            _float(m["I"]), _float(m["expected"]), _float(m["variance"]), _float(m["z"]),
            _float(m["p_normal"]), m.get("p_permutation"), int(m["n_permutations"]), int(m["n"]),
            m["weights"], int(m["same_place_pairs"]), m.get("model", ""), list(m.get("notes", [])))
    if (c := d.get("correlogram")) is not None:
        checks.correlogram = Correlogram(_frame(c["bands"]), c.get("model", ""))
    if (s := d.get("spatial_effect")) is not None:
        co = s["coefficients"]
        se = np.array([_float(r["se"]) for r in co])
        checks.spatial_effect = SpatialFit(
            [r["term"] for r in co], np.array([_float(r["estimate"]) for r in co]),
            np.diag(se**2), _float(s["sigma2_spatial"]), _float(s["range_km"]),
            dict(s["components"]), _float(s["loglik"]), _float(s["loglik_without_spatial_effect"]),
            _float(s["lr"]), _float(s["lr_p_approximate"]), s["method"], int(s["k"]),
            bool(s["converged"]), list(s.get("notes", [])))
    checks.shared = [SharedCells(r["covariate"], int(r["cells_shared"]), int(r["sites_sharing"]),
                                 int(r["rows_sharing"]), np.zeros(0, dtype=bool))
                     for r in d.get("shared_cells", [])]


def checks_from_result(result: dict[str, Any]) -> Checks | None:
    """The checks recorded in a fit's JSON result (None when it records none).

    Parameters
    ----------
    result : dict
        A fit's result as ``fit.json`` holds it (format 2).

    Returns
    -------
    Checks or None
        The result objects of the checks that ran; their ``to_dict()`` gives back what
        was recorded.

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.4, 0.7],
    ...                    "variance": [0.04, 0.05, 0.03, 0.06, 0.05, 0.04],
    ...                    "x": [1.0, 3.0, 2.0, 5.0, 2.5, 4.0]})
    >>> fit = MetaRegression(moderators="x").fit(df)
    >>> d = Checks(permutation=fit.permutation_test(99, seed=1, progress=False)).add_to(fit.to_dict())
    >>> checks_from_result(d).add_to(fit.to_dict()) == d
    True
    """
    from envlink.metareg.permutation import PermutationResult

    checks = Checks()
    if (perm := (result.get("moderator_test") or {}).get("permutation")) is not None:
        checks.permutation = PermutationResult.from_dict(perm)
    if result.get("scan") is not None:
        checks.scan = _scan(result["scan"])
    if result.get("imputation") is not None:
        checks.imputation = _imputation(result["imputation"])
    diagnostics = result.get("diagnostics") or {}
    if diagnostics.get("small_study") is not None:
        checks.bias = _bias(diagnostics["small_study"])
    _spatial(diagnostics.get("spatial") or {}, checks)
    ran = [checks.permutation, checks.scan, checks.imputation, checks.bias, checks.moran,
           checks.correlogram, checks.spatial_effect, *checks.shared]
    return checks if any(r is not None for r in ran) else None
