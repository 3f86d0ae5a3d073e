"""Window scans under meta-analytic weights: each window's fit and a family-wise permutation p.

:func:`scan_windows` takes a table and a matrix of candidate moderator columns (one
per window × statistic, e.g. from ``envlink.scan``), fits the chosen model once per
candidate (the fixed moderators, then the candidate), and reports for each window
its slope, SE, z or t, per-window p, Q_M, and a maximum-likelihood comparison with
the model without the candidate. Family-wise inference is by permutation of the
maximum statistic (Westfall & Young 1993): see :mod:`envlink.metareg.scan_core`.

Only the family-wise p supports a claim about the best window: its per-window p
and its slope are chosen as the best of many and are biased (the slope away from
zero). :class:`ScanResult` says so in every output.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from envlink.errors import InputError, ModelError, TooFewRowsError, param_error
from envlink.metareg.design import design_from_frame
from envlink.metareg.frame import model_frame
from envlink.metareg.scan_core import ScanModel, fit_windows, permutation_maxima
from envlink.metareg.shuffles import PERMUTATION_SCHEMES, Shuffler, default_scheme
from envlink.metareg.stacked import STACKED_METHODS
from envlink.metareg.vocabulary import ESTIMATORS, TESTS

__all__ = ["ScanResult", "scan_windows", "FIT_COLUMNS"]

#: the columns each window gets in :attr:`ScanResult.table`, after its descriptors
FIT_COLUMNS = ("k", "slope", "se", "statistic", "p", "ci_low", "ci_high", "Q_M", "Q_M_p", "tau2",
               "loglik_ml", "lr", "lr_p", "delta_aic", "p_window_permutation", "p_family")
CAUTION = ("The best window's slope and per-window p are the best of {n} windows tried: the "
           "slope is biased away from zero and the per-window p is too small. Only the "
           "family-wise p ({p}) supports a claim that any window is associated with the effects.")


@dataclass
class ScanResult:
    """A window scan: one row per candidate window, the best window and its family-wise p.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per candidate column, in the order given: its descriptors (e.g.
        ``lag``, ``span``, ``anchor``, ``stat``), then :data:`FIT_COLUMNS`:
        ``statistic`` is z (or t with Knapp-Hartung), ``p`` its per-window p,
        ``p_window_permutation`` the permutation p of that window alone and
        ``p_family`` its family-wise p (single-step maxT).
    best : str
        The window with the largest ``|statistic|``.
    family_p : float or None
        The best window's family-wise p (None without permutations).
    n_windows : int
        Windows in the family (candidates with a usable fit).
    """

    table: pd.DataFrame
    best: str
    family_p: float | None
    n_windows: int
    n_permutations: int
    seed: int | None
    scheme: str
    method: str
    test: str
    moderators: str | None
    nested: str | None
    k: int
    statistic_kind: str
    maxima: np.ndarray = field(repr=False, default_factory=lambda: np.zeros(0))
    notes: list[str] = field(default_factory=list)

    @property
    def best_row(self) -> pd.Series:
        """The best window's row of :attr:`table`."""
        return self.table.loc[self.best]

    def caution(self) -> str:
        """The caution every output carries (the number of windows and the family-wise p)."""
        p = "not computed" if self.family_p is None else f"{self.family_p:.4g}"
        return CAUTION.format(n=self.n_windows, p=p)

    def heatmap(self, value: str = "statistic", **select: Any) -> pd.DataFrame:
        """A lag × span table of ``value`` (rows: lag, columns: span), heatmap-ready.

        Other descriptors (``anchor``, ``stat`` ...) with several values must be
        chosen by keyword, e.g. ``heatmap("slope", anchor="start", stat="mean")``.

        Examples
        --------
        >>> t = pd.DataFrame({"lag": [0, 0, 1, 1], "span": [1, 2, 1, 2], "statistic": [1., 2, 3, 4]},
        ...                  index=["a", "b", "c", "d"])
        >>> r = ScanResult(t, "d", 0.01, 4, 99, 1, "rows", "REML", "z", None, None, 20, "|z|")
        >>> r.heatmap().values.tolist()
        [[1.0, 2.0], [3.0, 4.0]]
        """
        t = self.table
        if not {"lag", "span"} <= set(t.columns):
            raise InputError("heatmap() needs 'lag' and 'span' descriptors of the windows.")
        if value not in t.columns:
            raise param_error("value", "ScanResult.heatmap", "a column of the scan table", value)
        for key, val in select.items():
            if key not in t.columns:
                raise param_error(key, "ScanResult.heatmap", "a descriptor of the windows", val)
            t = t[t[key] == val]
        rest = [c for c in t.columns if c not in ("lag", "span", *FIT_COLUMNS)
                and t[c].nunique(dropna=False) > 1]
        if rest:
            raise InputError(f"The windows differ in {', '.join(rest)}; choose one value of each, "
                             f"e.g. heatmap({value!r}, {rest[0]}={t[rest[0]].iloc[0]!r}).")
        return t.pivot_table(index="lag", columns="span", values=value, aggfunc="first")

    def lines(self) -> list[str]:
        """The scan's summary in plain sentences (fit.txt, the command line)."""
        r = self.best_row
        fam = "not computed" if self.family_p is None else f"{self.family_p:.4g}"
        out = [f"Window scan: {self.n_windows} windows tried, {self.method} "
               f"{'with studies nested' if self.nested else ''} model".replace("  ", " "),
               f"  best window: {self.best} (slope {r['slope']:.4g}, SE {r['se']:.4g}, "
               f"{self.statistic_kind.strip('|')} = {r['statistic']:.4g}, per-window p = "
               f"{r['p']:.4g})",
               f"  family-wise p over {self.n_windows} windows: {fam} ({self.n_permutations} "
               f"permutations, seed {self.seed}, "
               f"{PERMUTATION_SCHEMES[self.scheme].info['words']}; Westfall & Young maxT)",
               "  caution: " + self.caution()]
        return out + [f"  note: {n}" for n in self.notes]

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary (see docs/inference.md for the keys)."""
        rows = []
        for name, row in self.table.iterrows():
            item: dict[str, Any] = {"window": str(name)}
            for key, val in row.items():
                item[str(key)] = _plain(val)
            rows.append(item)
        return {
            "n_windows": self.n_windows, "n_candidates": int(len(self.table)),
            "best_window": self.best, "family_p": self.family_p,
            "family_p_label": f"family-wise p over {self.n_windows} windows",
            "n_permutations": self.n_permutations, "seed": self.seed, "scheme": self.scheme,
            "method": self.method, "test": self.test, "statistic": self.statistic_kind,
            "moderators": self.moderators, "nested": self.nested, "k": self.k,
            "caution": self.caution(), "windows": rows, "notes": list(self.notes),
            "null_maxima": [_plain(float(m)) for m in np.asarray(self.maxima, dtype=np.float64)],
        }


def _plain(val: Any) -> Any:
    if isinstance(val, np.generic):
        val = val.item()
    if isinstance(val, float) and not np.isfinite(val):
        return None
    return val


def _options(method: str, test: str, nested: str | None, cluster: Any, tau2: float | None,
             n_permutations: int, level: float) -> tuple[str, str]:
    caller = "scan_windows"
    label = "fixed" if tau2 is not None else ESTIMATORS.parse(method).entry.name
    if label not in STACKED_METHODS or (nested is not None and label not in ("REML", "ML")):
        raise param_error("method", caller, "'REML', 'ML' or 'DL' ('REML' or 'ML' with nested=)",
                          method)
    if cluster is not None:
        raise InputError("The window scan has no cluster-robust tests; drop cluster= (use "
                         "nested= for effects nested in studies).")
    if not isinstance(n_permutations, int | np.integer) or n_permutations < 0:
        raise param_error("n_permutations", caller, "a whole number >= 0", n_permutations)
    if not 0 < level < 1:
        raise param_error("level", caller, "a number between 0 and 1", level)
    return label, TESTS.parse(test).entry.name


def _candidates(candidates: Any, data: pd.DataFrame, windows: Any) -> tuple[pd.DataFrame,
                                                                               pd.DataFrame]:
    if not isinstance(candidates, pd.DataFrame):
        raise param_error("candidates", "scan_windows", "a DataFrame of candidate columns",
                          type(candidates).__name__)
    if len(candidates) != len(data) or candidates.shape[1] == 0:
        raise InputError(f"candidates must hold one row per row of the table ({len(data)}) and at "
                         f"least one column; got shape {candidates.shape}.")
    bad = [c for c in candidates.columns if not pd.api.types.is_numeric_dtype(candidates[c])]
    if bad:
        raise InputError(f"Candidate column {bad[0]!r} must hold numbers.")
    names = [str(c) for c in candidates.columns]
    if windows is None:
        windows = pd.DataFrame(index=names)
    windows = pd.DataFrame(windows).copy()
    windows.index = [str(i) for i in windows.index]
    if list(windows.index) != names:
        raise InputError("windows must describe the candidate columns, one row each, in their "
                         "order (its index = the candidate column names).")
    return candidates.set_axis(names, axis=1), windows


def scan_windows(data: pd.DataFrame, candidates: pd.DataFrame, *, effect: str = "effect",
                 variance: str = "variance", moderators: str | None = None,
                 nested: str | None = None, method: str = "REML", test: str = "z",
                 tau2: float | None = None, windows: pd.DataFrame | None = None,
                 n_permutations: int = 1000, seed: int | None = None,
                 scheme: str | None = None, level: float = 0.95, skip_rejected: bool = True,
                 cluster: Any = None, progress: bool | None = None) -> ScanResult:
    """Fit the model once per candidate column and give a family-wise permutation p.

    Parameters
    ----------
    data : pandas.DataFrame
        Effects, variances, fixed moderators and the ``nested`` column.
    candidates : pandas.DataFrame
        One column per candidate window (numbers; a missing value leaves that row
        out of that window's fit), one row per row of ``data``.
    effect, variance, moderators, nested, method, test, tau2, level
        As for :class:`~envlink.metareg.MetaRegression`; ``moderators`` are the
        moderators kept in every window's model (the candidate comes last). tau²
        by REML, ML or DL (or fixed); the nested model by REML or ML.
    windows : pandas.DataFrame, optional
        Descriptors of each candidate (index: the candidate column names), e.g.
        ``lag``, ``span``, ``unit``, ``anchor``, ``stat``; copied into the table.
    n_permutations : int, default 1000
        Permutations for the family-wise p (0: none, and no family-wise p).
    seed : int, optional
    scheme : str, optional
        :data:`~envlink.metareg.shuffles.PERMUTATION_SCHEMES`; default ``within``
        with ``nested=``, else ``rows``. The same permutation of the candidate rows
        is applied to every window.
    skip_rejected : bool, default True
        Leave out rows the locate stage rejected (:func:`~envlink.metareg.frame.model_frame`).
    progress : bool, optional

    Returns
    -------
    ScanResult

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.normal(size=(40, 3)); v = np.full(40, 0.02)
    >>> df = pd.DataFrame({"effect": 0.5 * x[:, 1] + rng.normal(0, 0.2, 40), "variance": v})
    >>> c = pd.DataFrame(x, columns=["w0", "w1", "w2"])
    >>> r = scan_windows(df, c, n_permutations=199, seed=3)
    >>> r.best, r.n_windows, r.family_p
    ('w1', 3, 0.005)
    """
    label, test_name = _options(method, test, nested, cluster, tau2, n_permutations, level)
    cands, desc = _candidates(candidates, data, windows)
    frame = model_frame(data, effect=effect, variance=variance, moderators=moderators,
                        nested=nested, skip_rejected=skip_rejected)
    d = design_from_frame(frame)
    y, v, Xf = d.dense()
    codes = pd.factorize(np.asarray(d.groups["nested"]))[0] if nested is not None else None
    if d.k <= Xf.shape[1] + 1:
        raise TooFewRowsError(f"Only k = {d.k} usable rows for {Xf.shape[1] + 1} coefficients per "
                         "window; a scan needs more rows than coefficients.")
    cols = cands.to_numpy(dtype=np.float64)[frame.included]
    cols[~np.isfinite(cols)] = np.nan
    model = ScanModel(y, v, Xf, codes, label, test_name, tau2, d.intercept)
    obs = fit_windows(model, cols, level)
    if not obs.usable.any():
        raise ModelError("No candidate window can be fitted (each has too few rows with a value, "
                         "or a constant column).")
    name = PERMUTATION_SCHEMES.parse(scheme).entry.name if scheme else default_scheme(
        nested is not None)
    notes = _notes(obs, cands.columns, d.k)
    p_alone = p_family = np.full(len(cands.columns), np.nan)
    maxima = np.zeros(0)
    if n_permutations:
        shuffler = Shuffler(d.k, name, groups=d.groups.get("nested"), seed=seed)
        if shuffler.movable() == 0:
            raise ModelError(f"The permutation scheme {name!r} cannot move any row; use another.")
        mx = permutation_maxima(model, cols, obs, n_permutations, shuffler, progress=progress)
        p_family = np.where(obs.usable, (1 + mx.ge_family) / (1 + n_permutations), np.nan)
        p_alone = np.where(obs.usable, (1 + mx.ge_alone) / (1 + n_permutations), np.nan)
        maxima = mx.maxima
    table = _table(desc, obs, p_alone, p_family)
    best = str(table.index[int(np.nanargmax(np.where(obs.usable, np.abs(obs.statistic),
                                                     np.nan)))])
    fam = float(table.loc[best, "p_family"]) if n_permutations else None
    if not n_permutations:
        notes.append("No permutations were run: the per-window p-values are not corrected for "
                     f"the {int(obs.usable.sum())} windows tried.")
    return ScanResult(table, best, fam, int(obs.usable.sum()), int(n_permutations), seed, name,
                      label, "z" if test_name == "z" else "t", moderators, nested, d.k,
                      "|z|" if test_name == "z" else "|t|", maxima, notes)


def _table(desc: pd.DataFrame, obs: Any, p_alone: np.ndarray, p_family: np.ndarray) -> pd.DataFrame:
    values = {"k": obs.k.astype(np.int64), "slope": obs.slope, "se": obs.se,
              "statistic": obs.statistic, "p": obs.p, "ci_low": obs.ci_low,
              "ci_high": obs.ci_high, "Q_M": obs.Q_M, "Q_M_p": obs.Q_M_p, "tau2": obs.tau2,
              "loglik_ml": obs.loglik_ml, "lr": obs.lr, "lr_p": obs.lr_p,
              "delta_aic": obs.delta_aic, "p_window_permutation": p_alone, "p_family": p_family}
    out = desc.copy()
    for key in FIT_COLUMNS:
        col = np.asarray(values[key])
        out[key] = np.where(obs.usable, col, np.nan) if col.dtype.kind == "f" else col
    return out


def _notes(obs: Any, names: pd.Index, k: int) -> list[str]:
    notes = []
    bad = [str(n) for n, ok in zip(names, obs.usable, strict=True) if not ok]
    if bad:
        notes.append(f"{len(bad)} candidate window(s) could not be fitted (too few rows with a "
                     f"value, or a constant column) and are not in the family: "
                     f"{', '.join(bad[:5])}{' ...' if len(bad) > 5 else ''}.")
    short = int((obs.k[obs.usable] < k).sum())
    if short:
        notes.append(f"{short} window(s) lack values in some rows; each is fitted to its own rows "
                     "(column k), so their statistics rest on different rows.")
    return notes
