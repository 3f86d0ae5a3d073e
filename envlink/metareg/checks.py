"""A fitted model and the checks run on it: where each check's result goes in fit.json and fit.txt.

The checks of a fit are result objects of their own: permutation tests of its
moderators (:mod:`envlink.metareg.permutation`), a window scan
(:mod:`envlink.metareg.scan`), a fit over imputed dates (:mod:`envlink.metareg.pooling`),
small-study checks inside the model (:mod:`envlink.metareg.bias`), Moran's I, a
correlogram, shared grid cells (:mod:`envlink.metareg.spatial`) and a spatial random
effect (:mod:`envlink.metareg.spatial_re`). :class:`Checks` gathers those that ran;
:meth:`Checks.add_to` puts their JSON into the sections of the fit's result
(docs/methods.md, "Result fields"):

- ``moderator_test.permutation``: the permutation tests (one p per term, the omnibus
  p of Q_M), and ``coefficients.table[i].permutation_p``: the p of the term whose
  only column is coefficient ``i`` (null for the intercept and for the coefficients
  of a term with several columns, whose p is the term's);
- ``scan`` and ``imputation``: top-level sections, present when they ran;
- ``diagnostics.small_study`` and ``diagnostics.spatial`` (``moran``,
  ``correlogram``, ``spatial_effect``, ``shared_cells``).

:meth:`Checks.section_lines` gives their sentences by section of the text summary
(:class:`~envlink.metareg.summary.FitSummary`), and :class:`FitWithChecks` is a fit
whose ``to_dict()`` and ``summary()`` hold both: what a project run writes as
``fit.json`` and ``fit.txt``. The result objects are read duck-typed (their
``to_dict()`` and ``lines()``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from envlink.metareg.summary import FitSummary

__all__ = ["Checks", "FitWithChecks", "MODERATOR_TEST", "SCAN", "IMPUTATION", "DIAGNOSTICS"]

#: Sections of the text summary the checks' sentences go to (the first is the fit's own)
MODERATOR_TEST, SCAN, IMPUTATION, DIAGNOSTICS = ("Moderator test", "Window scan",
                                                 "Imprecise dates", "Diagnostics")


def _permutation_p(table: list[dict[str, Any]], perm: dict[str, Any]) -> list[dict[str, Any]]:
    """The coefficient table with each row's ``permutation_p`` (a term's ``columns`` are the
    names of its coefficients)."""
    alone = {t["columns"][0]: t["p"] for t in perm["terms"] if len(t["columns"]) == 1}
    return [{**row, "permutation_p": alone.get(row["term"])} for row in table]


@dataclass
class Checks:
    """The result objects of the checks that ran on one fit (None where not asked for).

    Examples
    --------
    >>> import pandas as pd
    >>> from envlink.metareg.model import MetaRegression
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.4, 0.7],
    ...                    "variance": [0.04, 0.05, 0.03, 0.06, 0.05, 0.04],
    ...                    "x": [1.0, 3.0, 2.0, 5.0, 2.5, 4.0]})
    >>> fit = MetaRegression(moderators="x").fit(df)
    >>> checks = Checks(permutation=fit.permutation_test(99, seed=1, progress=False))
    >>> d = checks.add_to(fit.to_dict())
    >>> d["moderator_test"]["permutation"]["omnibus"]["label"]
    'omnibus permutation p of Q_M (all moderators of this model)'
    >>> [row["permutation_p"] is None for row in d["coefficients"]["table"]]
    [True, False]
    """

    permutation: Any = None
    scan: Any = None
    imputation: Any = None
    bias: Any = None
    moran: Any = None
    correlogram: Any = None
    spatial_effect: Any = None
    shared: list[Any] = field(default_factory=list)

    def spatial(self) -> dict[str, Any]:
        """The ``diagnostics.spatial`` section (empty when no spatial check ran)."""
        out = {k: getattr(self, k).to_dict() for k in ("moran", "correlogram", "spatial_effect")
               if getattr(self, k) is not None}
        if self.shared:
            out["shared_cells"] = [s.to_dict() for s in self.shared]
        return out

    def add_to(self, result: dict[str, Any]) -> dict[str, Any]:
        """A copy of a fit's result (its ``to_dict()``) with the checks in their sections."""
        out = dict(result)
        if self.permutation is not None:
            perm = self.permutation.to_dict()
            out["moderator_test"] = {**result["moderator_test"], "permutation": perm}
            co = result["coefficients"]
            out["coefficients"] = {**co, "table": _permutation_p(co["table"], perm)}
        diagnostics = dict(result.get("diagnostics") or {})
        if self.bias is not None:
            diagnostics["small_study"] = self.bias.to_dict()
        if spatial := self.spatial():
            diagnostics["spatial"] = spatial
        out["diagnostics"] = diagnostics
        warnings = out.pop("warnings", [])
        for key in ("scan", "imputation"):
            if getattr(self, key) is not None:
                out[key] = getattr(self, key).to_dict()
        out["warnings"] = warnings  # the notes stay last
        return out

    def section_lines(self) -> dict[str, list[str]]:
        """The checks' sentences by section of the text summary (sections without any left out)."""
        diag: list[str] = []
        if self.bias is not None:
            diag += self.bias.lines()
        if self.moran is not None:
            diag += [self.moran.line(), *(f"  note: {n}" for n in self.moran.notes)]
        if self.spatial_effect is not None:
            diag += self.spatial_effect.lines()
        diag += [line for s in self.shared if (line := s.line())]
        out = {MODERATOR_TEST: self.permutation.lines() if self.permutation is not None else [],
               SCAN: self.scan.lines() if self.scan is not None else [],
               IMPUTATION: self.imputation.lines() if self.imputation is not None else [],
               DIAGNOSTICS: diag}
        return {title: lines for title, lines in out.items() if lines}

    def lines(self) -> list[str]:
        """Every check's sentences, one block per section."""
        return [line for lines in self.section_lines().values() for line in ["", *lines]]


class FitWithChecks:
    """A fitted model with its checks: ``to_dict()`` and ``summary()`` hold both.

    Every other attribute is the fit's own (``fit_with_checks.coef_``).
    """

    def __init__(self, fit: Any, checks: Checks) -> None:
        self.fit = fit
        self.checks = checks

    def to_dict(self) -> dict[str, Any]:
        """The fit's JSON result with the checks in their sections (:meth:`Checks.add_to`)."""
        return self.checks.add_to(self.fit.to_dict())

    def summary(self) -> FitSummary:
        """The fit's text summary with the checks' sentences in their sections."""
        return FitSummary(self.to_dict(), self.fit, extra=self.checks.section_lines())

    def __getattr__(self, name: str) -> Any:  # the report and the export read the fit's attributes
        if name in ("fit", "checks"):  # not set yet (a copy being made)
            raise AttributeError(name)
        return getattr(self.fit, name)
