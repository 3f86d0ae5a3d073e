"""Permutation tests of a fitted model's moderators: per-term and omnibus p, fast and by refits.

A permutation test (Higgins & Thompson 2004) rearranges moderator rows against the
effects and variances (under a scheme of :data:`~envlink.metareg.shuffles.PERMUTATION_SCHEMES`),
refits the model each time, and counts how often the refitted statistic reaches
the observed one: ``p = (1 + #{T* >= T}) / (1 + n)``. Two kinds of p are reported
and labelled apart:

- the **omnibus** p: every moderator column permuted together, statistic ``Q_M``
  (this model's test of all its moderators at once);
- one p **per term** (``sst_anom``, ``C(method)``): that term's columns permuted
  alone, the other moderators kept with their rows, statistic ``|z|`` / ``|t|``
  (or the term's Wald statistic when it has several columns).

The refits of every permutation are done at once by the stacked fits of
:mod:`envlink.metareg.stacked` and :mod:`envlink.metareg.stacked_nested` (tau² by
REML, ML, DL or fixed; the multilevel model by REML or ML), warm-started at the
model refitted without the permuted columns. Models those cannot fit (CR2
cluster-robust tests, other estimators) are refitted one permutation at a time
(:func:`refit_statistics`), which is also the reference the fast path is tested
against: both see the same permutations of a seed.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from envlink.errors import MetaRegressionWarning, ModelError, ModelOptionError
from envlink.metareg.formula import INTERCEPT, moderator_positions
from envlink.metareg.shuffles import PERMUTATION_SCHEMES, Shuffler, default_scheme
from envlink.metareg.stacked import STACKED_METHODS, fit_stacked, scaled_vcov
from envlink.metareg.stacked_nested import fit_stacked_nested

__all__ = ["PermutationResult", "Family", "model_families", "permutation_test_model",
           "refit_statistics", "family_statistics"]

_EPS = 1e-12
_BATCH_ROWS = 75_000  # rows x designs per stacked batch: small arrays stay in the CPU caches


@dataclass(frozen=True)
class Family:
    """What one permutation test rearranges: the columns of the full design permuted together."""

    name: str  # a term (``sst_anom``) or ``"Q_M"`` for the omnibus test
    columns: tuple[int, ...]  # positions in the full design (intercept column included)
    omnibus: bool = False

    def kind(self, test: str) -> str:
        """The statistic compared: ``|z|``, ``|t|``, ``Q_M`` or a term's Wald statistic."""
        if self.omnibus:
            return "Q_M (chi²)" if test == "z" else "Q_M (F)"
        if len(self.columns) == 1:
            return "|z|" if test == "z" else "|t|"
        return "Wald chi²" if test == "z" else "Wald F"


def model_families(terms: list[str], spec: Any = None) -> list[Family]:
    """The omnibus family, then one family per formula term (its columns), intercept excluded.

    Examples
    --------
    >>> [(f.name, f.columns) for f in model_families(["intercept", "x", "z"])]
    [('Q_M', (1, 2)), ('x', (1,)), ('z', (2,))]
    """
    idx = moderator_positions(terms)
    fams = [Family("Q_M", tuple(idx), True)]
    slices = getattr(spec, "term_slices", None)
    if slices:
        for term, sl in slices.items():
            cols = tuple(range(sl.start, sl.stop))
            name = str(term)
            if name in ("1", INTERCEPT) or not cols:
                continue
            fams.append(Family(name, cols))
    else:
        fams += [Family(terms[j], (j,)) for j in idx]
    return fams


@dataclass
class PermutationResult:
    """Permutation p of a fitted model: the omnibus test and each term (see the module docs)."""

    n_permutations: int
    seed: int | None
    scheme: str
    engine: str
    test: str
    terms: pd.DataFrame  # term, columns, statistic_kind, statistic, p
    Q_M: float | None
    Q_M_p: float | None
    notes: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        """Plain sentences saying exactly what each p corrects (for fit.txt and the report)."""
        how = PERMUTATION_SCHEMES[self.scheme].info["words"]
        out = [f"Permutation test of this model ({self.n_permutations} permutations, seed "
               f"{self.seed}, {how}; p = (1 + count of permuted statistics >= observed) / "
               f"(1 + {self.n_permutations})):"]
        for r in self.terms.itertuples(index=False):
            out.append(f"  permutation p for {r.term} (this model; its columns permuted, other "
                       f"moderators kept): {r.p:.4g}  [{r.statistic_kind} = {r.statistic:.4g}]")
        if self.Q_M_p is not None:
            out.append(f"  omnibus permutation p of Q_M (all moderators of this model permuted "
                       f"together): {self.Q_M_p:.4g}")
        out.append("  These p-values correct for nothing beyond this one model: not for other "
                   "windows, statistics or models tried.")
        return out + [f"  note: {n}" for n in self.notes]

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary (see docs/inference.md for the keys)."""
        return {
            "n_permutations": self.n_permutations, "seed": self.seed, "scheme": self.scheme,
            "engine": self.engine, "test": self.test,
            "terms": [{"term": r.term, "columns": list(r.columns), "statistic": r.statistic_kind,
                       "value": _num(r.statistic), "p": float(r.p),
                       "label": f"permutation p for {r.term} (this model)"}
                      for r in self.terms.itertuples(index=False)],
            "omnibus": None if self.Q_M_p is None else {
                "statistic": "Q_M", "value": _num(self.Q_M), "p": float(self.Q_M_p),
                "label": "omnibus permutation p of Q_M (all moderators of this model)"},
            "corrects_for": "this model only (not for windows, statistics or models tried)",
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> PermutationResult:
        """The result again from its :meth:`to_dict` (a project run records that in its provenance).

        Examples
        --------
        >>> r = PermutationResult(9, 1, "rows", "stacked", "z", pd.DataFrame({"term": ["x"],
        ...     "columns": [("x",)], "statistic_kind": ["|z|"], "statistic": [2.0], "p": [0.1]}),
        ...     4.0, 0.1)
        >>> PermutationResult.from_dict(r.to_dict()).to_dict() == r.to_dict()
        True
        """
        terms = pd.DataFrame({
            "term": [t["term"] for t in d["terms"]],
            "columns": [tuple(t["columns"]) for t in d["terms"]],
            "statistic_kind": [t["statistic"] for t in d["terms"]],
            "statistic": [np.nan if t["value"] is None else float(t["value"]) for t in d["terms"]],
            "p": [float(t["p"]) for t in d["terms"]]})
        omnibus = d.get("omnibus") or {}
        return cls(int(d["n_permutations"]), d.get("seed"), d["scheme"], d["engine"], d["test"],
                   terms, omnibus.get("value"), omnibus.get("p"), list(d.get("notes", [])))


def _num(x: Any) -> float | None:
    return None if x is None or not np.isfinite(x) else float(x)


def family_statistics(coef: np.ndarray, vcov: np.ndarray, fam: Family, test: str) -> np.ndarray:
    """The compared statistic of ``fam`` for stacked coefficients ``(N, p)`` and covariances."""
    idx = list(fam.columns)
    b = coef[:, idx]
    V = vcov[:, idx][:, :, idx]
    with np.errstate(invalid="ignore", divide="ignore"):
        if len(idx) == 1 and not fam.omnibus:
            return np.abs(b[:, 0]) / np.sqrt(V[:, 0, 0])
        w = np.full(b.shape[0], np.nan)
        good = np.isfinite(V).all(axis=(1, 2)) & np.isfinite(b).all(axis=1)
        if good.any():
            w[good] = np.einsum("ni,ni->n", b[good],
                                np.linalg.solve(V[good], b[good][:, :, None])[:, :, 0])
    return w if test == "z" else w / len(idx)


def _stacked_possible(model: Any) -> bool:
    return model.cluster is None and model.method_ in STACKED_METHODS


def _dense(model: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    y, v, X = model.design_.dense()
    groups = model.design_.groups.get("nested")
    codes = pd.factorize(np.asarray(groups))[0] if groups is not None else None
    return y, v, X, codes


def _stacked_fits(model: Any, X: np.ndarray, start: Any) -> Any:
    y, v, _, codes = _dense(model)
    if codes is not None:
        return fit_stacked_nested(y, v, X, codes, method=model.method_, start=start,
                                  tol=model.tol, max_iter=model.max_iter)
    return fit_stacked(y, v, X, method=model.method_, tau2=model.tau2, start=start,
                       tol=model.tol, max_iter=model.max_iter)


def _warm_start(model: Any, fam: Family) -> Any:
    """Components of the model refitted without the family's columns (the null it tests)."""
    _, _, X, codes = _dense(model)
    keep = [j for j in range(X.shape[1]) if j not in fam.columns]
    f = _stacked_fits(model, X[None][:, :, keep], None)
    if codes is not None:
        return f.sigma2[0]
    return f.tau2[0] if np.isfinite(f.tau2[0]) else None


def _stack(X: np.ndarray, perms: np.ndarray, fam: Family) -> np.ndarray:
    out = np.repeat(X[None], perms.shape[0], axis=0)
    cols = list(fam.columns)
    out[:, :, cols] = X[:, cols][perms]
    return out


def _stacked_statistics(model: Any, perms: np.ndarray, fam: Family, start: Any) -> np.ndarray:
    """The family's statistic for each permutation, all refitted at once."""
    _, _, X, _ = _dense(model)
    f = _stacked_fits(model, _stack(X, perms, fam), start)
    vc = scaled_vcov(f, test="knapp-hartung" if model.test_ == "t" else "z",
                     truncate=model.truncate_kh)
    stat = family_statistics(f.coef, vc, fam, model.test_)
    redo = np.flatnonzero(~f.converged & ~f.singular)
    if redo.size:  # the few stacked fits that did not converge: refitted one by one
        stat[redo] = refit_statistics(model, perms[redo], fam)
    stat[f.singular] = np.inf  # a permutation that makes the design singular counts as extreme
    return stat


def refit_statistics(model: Any, perms: np.ndarray, fam: Family) -> np.ndarray:
    """The family's statistic for each permutation, refitting the model once per permutation.

    The straightforward reference of the stacked path (and the path of models it
    cannot fit); a refit that fails (singular design) gives ``inf``.
    """
    from envlink.metareg.design import Design

    d = model.design_
    y, v, X, _ = _dense(model)
    out = np.empty(perms.shape[0])
    cols = list(fam.columns)
    for i, perm in enumerate(perms):
        Xp = X.copy()
        Xp[:, cols] = X[perm][:, cols]
        Xm = Xp[:, 1:] if d.intercept else Xp
        dp = Design(y, v, Xm, d.intercept, list(d.names), None, 0, [], d.spec, dict(d.groups))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", MetaRegressionWarning)
                f = type(model)(**model.get_params()).fit(dp)
        except ModelError:
            out[i] = np.inf
            continue
        out[i] = family_statistics(f.coef_[None], f.vcov_[None], fam, f.test_)[0]
    return out


def _resolve_scheme(model: Any, scheme: str | None) -> str:
    nested = model.nested is not None
    name = PERMUTATION_SCHEMES.parse(scheme).entry.name if scheme else default_scheme(nested)
    return name


def permutation_test_model(model: Any, n_permutations: int, seed: int | None, *,
                           scheme: str | None = None, engine: str = "auto",
                           progress: bool | None = True) -> PermutationResult:
    """Permutation p of every term and of Q_M for a fitted :class:`MetaRegression`.

    Parameters
    ----------
    model : MetaRegression
        Fitted, with at least one moderator.
    n_permutations : int
        Number of permutations (>= 1).
    seed : int, optional
    scheme : str, optional
        A name of :data:`~envlink.metareg.shuffles.PERMUTATION_SCHEMES`; default
        ``within`` for nested models, else ``rows``.
    engine : {"auto", "stacked", "refit"}
        ``auto`` uses the stacked fits where the model allows them.
    progress : bool, optional

    Returns
    -------
    PermutationResult
    """
    from envlink.core.progress import progress_bar

    if not isinstance(n_permutations, int | np.integer) or n_permutations < 1:
        raise ModelOptionError(f"n_permutations must be a whole number of at least 1; got "
                         f"{n_permutations!r}.")
    fams = model_families(model.terms_, model.design_.spec)
    if not fams[0].columns:
        raise ModelOptionError("A permutation test needs at least one moderator besides the intercept.")
    name = _resolve_scheme(model, scheme)
    groups = model.design_.groups.get("nested")
    shuffler = Shuffler(model.k_, name, groups=groups, seed=seed)
    notes: list[str] = []
    if shuffler.movable() == 0:
        raise ModelError(f"The permutation scheme {name!r} cannot move any row of this model "
                         "(every nested= group has one row, or no two groups have the same "
                         "size); use another scheme.")
    fast = engine == "stacked" or (engine == "auto" and _stacked_possible(model))
    if engine == "stacked" and not _stacked_possible(model):
        raise ModelError("The stacked permutation engine fits tau² by REML, ML, DL or a fixed "
                         "value without cluster=; use engine='refit'.")
    # one term holding every moderator column: its statistic orders permutations as Q_M does
    run = fams[1:] if len(fams) == 2 and fams[1].columns == fams[0].columns else fams
    starts = {f.name: _warm_start(model, f) for f in run} if fast else {}
    observed = {f.name: _observed(model, f, fast, starts.get(f.name)) for f in run}
    ge = {f.name: 0 for f in run}
    batch = max(1, _BATCH_ROWS // max(model.k_, 1))
    done = 0
    bar = progress_bar(n_permutations, "permutations", "permutation", show=progress)
    try:
        while done < n_permutations:
            n = min(batch, n_permutations - done)
            perms = shuffler.draw(n)
            for f in run:
                stat = (_stacked_statistics(model, perms, f, starts[f.name]) if fast
                        else refit_statistics(model, perms, f))
                ge[f.name] += int(np.sum(stat >= observed[f.name] * (1 - _EPS)))
            done += n
            bar.update(n)
    finally:
        bar.close()
    return _result(model, fams, observed, ge, n_permutations, seed, name,
                   "stacked" if fast else "refit", notes)


def _observed(model: Any, fam: Family, fast: bool, start: Any) -> float:
    ident = np.arange(model.k_)[None]
    stat = (_stacked_statistics(model, ident, fam, start) if fast
            else refit_statistics(model, ident, fam))
    return float(stat[0])


def _result(model: Any, fams: list[Family], observed: dict[str, float], ge: dict[str, int],
            n: int, seed: int | None, scheme: str, engine: str,
            notes: list[str]) -> PermutationResult:
    p = {k: (1 + c) / (1 + n) for k, c in ge.items()}
    terms = [f for f in fams if not f.omnibus]
    if "Q_M" not in p:  # the one term's test is the omnibus test
        p["Q_M"] = p[terms[0].name]
    table = pd.DataFrame({
        "term": [f.name for f in terms],
        "columns": [tuple(model.terms_[j] for j in f.columns) for f in terms],
        "statistic_kind": [f.kind(model.test_) for f in terms],
        "statistic": [observed[f.name] for f in terms],
        "p": [p[f.name] for f in terms],
    })
    return PermutationResult(n, seed, scheme, engine, model.test_, table,
                             _num(model.Q_M_), p["Q_M"], notes)
