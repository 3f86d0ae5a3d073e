"""The mixed-effects meta-regression estimator: ``MetaRegression`` and ``meta_regression``.

Effects ``y_i`` with known sampling variances ``v_i`` follow
``y_i = x_iᵀ β + u_i + ε_i``, ``u_i ~ N(0, tau²)``, ``ε_i ~ N(0, v_i)``; with
``nested=`` the heterogeneity splits into a between-study and a within-study
component. Formulas and citations: docs/methods.md.
"""

from __future__ import annotations

import os
import warnings
from typing import Any

import numpy as np
import pandas as pd
from scipy import special, stats

from envlink.errors import EnvlinkWarning, InputError, ModelError, param_error
from envlink.metareg import estimators as est
from envlink.metareg import inference as inf
from envlink.metareg.design import (
    INTERCEPT,
    Design,
    design_from_arrays,
    design_from_frame,
    new_rows,
    rows_text,
)
from envlink.metareg.multilevel import fit_multilevel, study_blocks

__all__ = ["MetaRegression", "meta_regression", "MetaRegressionWarning"]

_TESTS = ("z", "knapp-hartung")


class MetaRegressionWarning(EnvlinkWarning):
    """A fit that ran but needs the user's attention (non-convergence, dropped rows)."""


def _use_numba() -> bool:
    return os.environ.get("ENVLINK_NUMBA", "1") != "0"


class MetaRegression:
    """Mixed-effects meta-regression with known sampling variances.

    Parameters
    ----------
    method : {"REML", "ML", "DL", "PM", "HE", "SJ"}, default "REML"
        Estimator of tau² (ignored when ``tau2`` is given). Multilevel models
        (``nested=``) use REML or ML.
    test : {"z", "knapp-hartung"}, default "z"
        Normal-theory tests, or Knapp-Hartung t and F tests with k - p df.
    tau2 : float, optional
        A fixed tau² instead of an estimate (0 gives the fixed-effect model).
    moderators : str, optional
        A formulaic right-hand side, e.g. ``"sst_anom + C(method, Treatment('transect'))"``.
    intercept : bool, default True
    nested : str, optional
        Column of study labels: effects nested in studies (two variance components).
    cluster : str, optional
        Column of cluster labels for CR2 cluster-robust standard errors with
        Satterthwaite degrees of freedom (t tests).
    truncate_kh : bool, default False
        Use the Knapp-Hartung scale ``max(1, q)``.
    level : float, default 0.95
        Confidence level of intervals.
    max_iter : int, default 100
    tol : float, default 1e-10
        Convergence on the relative change of tau².

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.6],
    ...                    "variance": [0.04, 0.05, 0.03, 0.06, 0.05],
    ...                    "x": [1.0, 2.0, 3.0, 4.0, 5.0]})
    >>> m = MetaRegression(moderators="x").fit(df)
    >>> [round(float(b), 4) for b in m.coef_]
    [0.0345, 0.1384]
    """

    def __init__(self, method: str = "REML", test: str = "z", *, tau2: float | None = None,
                 moderators: str | None = None, intercept: bool = True,
                 nested: Any = None, cluster: Any = None, truncate_kh: bool = False,
                 level: float = 0.95, max_iter: int = 100, tol: float = 1e-10) -> None:
        self.method = method
        self.test = test
        self.tau2 = tau2
        self.moderators = moderators
        self.intercept = intercept
        self.nested = nested
        self.cluster = cluster
        self.truncate_kh = truncate_kh
        self.level = level
        self.max_iter = max_iter
        self.tol = tol

    # ----------------------------------------------------------------- options
    def get_params(self) -> dict[str, Any]:
        """The constructor options, as given."""
        keys = ("method", "test", "tau2", "moderators", "intercept", "nested", "cluster",
                "truncate_kh", "level", "max_iter", "tol")
        return {k: getattr(self, k) for k in keys}

    def _check_options(self) -> tuple[str, str]:
        caller = "MetaRegression"
        method = str(self.method).upper()
        if method not in est.METHODS:
            raise param_error("method", caller, f"one of {', '.join(est.METHODS)}", self.method)
        test = str(self.test).lower()
        if test not in _TESTS:
            raise param_error("test", caller, "'z' or 'knapp-hartung'", self.test)
        if not (isinstance(self.level, float | int) and 0 < self.level < 1):
            raise param_error("level", caller, "a number between 0 and 1", self.level)
        if self.tau2 is not None and not (np.isfinite(self.tau2) and self.tau2 >= 0):
            raise param_error("tau2", caller, "None or a finite number >= 0", self.tau2)
        if not (isinstance(self.max_iter, int) and self.max_iter >= 1):
            raise param_error("max_iter", caller, "an integer >= 1", self.max_iter)
        if not (self.tol > 0):
            raise param_error("tol", caller, "a positive number", self.tol)
        if self.nested is not None and method not in ("REML", "ML"):
            raise param_error("method", caller, "'REML' or 'ML' for a nested (multilevel) model",
                              self.method)
        if self.nested is not None and self.tau2 is not None:
            raise param_error("tau2", caller, "None for a nested (multilevel) model", self.tau2)
        return method, test

    # --------------------------------------------------------------------- fit
    def fit(self, data: pd.DataFrame | None = None, *, effect: str = "effect",
            variance: str = "variance", y: Any = None, v: Any = None,
            X: Any = None) -> MetaRegression:
        """Fit the model to a table (with the ``moderators`` formula) or to arrays.

        Parameters
        ----------
        data : DataFrame, optional
            The table; ``effect`` and ``variance`` name its columns.
        y, v, X : arrays, optional
            Effects, sampling variances and moderator matrix (without the intercept
            column), NumPy or Dask, used when ``data`` is None. float32 storage is
            summed in float64. ``nested`` / ``cluster`` may then be label arrays.

        Returns
        -------
        MetaRegression
            ``self``, fitted.
        """
        self._check_options()
        if data is not None:
            if y is not None or v is not None or X is not None:
                raise InputError("Give either data= (a table) or y=, v=, X= arrays, not both.")
            if self.nested is not None and not isinstance(self.nested, str):
                raise InputError("With data=, 'nested' must be a column name.")
            if self.cluster is not None and not isinstance(self.cluster, str):
                raise InputError("With data=, 'cluster' must be a column name.")
            d = design_from_frame(data, effect=effect, variance=variance,
                                  moderators=self.moderators, intercept=self.intercept,
                                  extra={"nested": self.nested, "cluster": self.cluster})
        else:
            if y is None or v is None:
                raise InputError("fit() needs data= (a table) or both y= and v= arrays.")
            if self.moderators:
                raise InputError("A moderators formula needs data= (a table); with arrays pass X=.")
            groups = {"nested": self.nested, "cluster": self.cluster}
            d = design_from_arrays(y, v, X, intercept=self.intercept, groups=groups)
        return self._fit_design(d, emit=True)

    def _fit_design(self, d: Design, emit: bool) -> MetaRegression:
        method, test = self._check_options()
        k, p = d.k, d.p
        if p == 0:
            raise ModelError("The model has no coefficients: keep the intercept or add moderators.")
        if k <= p:
            raise ModelError(
                f"Only k = {k} usable effects for p = {p} coefficients; a meta-regression "
                f"needs more effects than coefficients (k > p). Use fewer moderators."
            )
        msgs: list[str] = []
        if d.n_dropped:
            gone = np.flatnonzero(~d.keep) if d.keep is not None else np.asarray(d.dropped_labels)
            msgs.append(f"{d.n_dropped} row(s) dropped for missing effect, variance or "
                        f"moderator values ({rows_text(gone, d.all_labels)}).")
        un = _use_numba()
        s0 = est.checked_sums(d, un)
        g0 = est.gls(s0, 0.0)
        self._g0_syy = s0.syy1
        self._design, self._g0, self._un = d, g0, un
        self.k_, self.p_ = k, p
        self.n_dropped_ = d.n_dropped
        self.terms_ = list(d.names)
        self.Q_E_ = float(g0.yPy)
        self.Q_E_df_ = k - p
        self.Q_E_p_ = float(special.chdtrc(k - p, self.Q_E_))
        s2typ = (k - p) / g0.trP if g0.trP > 0 else 0.0
        self.typical_variance_ = s2typ
        self.variance_components_: dict[str, float] = {}
        if self.Q_E_ <= 1e-12 * max(1.0, abs(self._g0_syy)):
            msgs.append("All effects are fitted exactly (Q_E = 0, e.g. identical effects): "
                        "tau² is 0 and I² is 0; heterogeneity cannot be assessed.")
        if self.nested is not None:
            self._fit_nested(d, method, g0, msgs)
        else:
            self._fit_independent(d, method, g0, msgs)
        self._inference(d, test, msgs)
        if not self.converged_ and emit:
            warnings.warn(msgs[-1] if msgs else "The fit did not converge.", MetaRegressionWarning,
                          stacklevel=3)
        if d.n_dropped and emit:
            warnings.warn(msgs[0], MetaRegressionWarning, stacklevel=3)
        self.warnings_ = msgs
        self._cache: dict[str, Any] = {}
        return self

    def _fit_independent(self, d: Design, method: str, g0: est.GLS, msgs: list[str]) -> None:
        if self.tau2 is not None:
            self.method_ = "fixed"
            tf = est.TauFit(float(self.tau2), True, 0)
        else:
            self.method_ = method
            tf = est.estimate_tau2(d, method, tol=self.tol, max_iter=self.max_iter,
                                   use_numba=self._un, g0=g0)
        msgs.extend(tf.messages)
        t = tf.tau2
        g = tf.fit if tf.fit is not None and tf.fit.tau2 == t else (
            g0 if t == 0.0 else est.gls(est.sums_at(d, t, self._un), t))
        self._g = g
        self.tau2_ = float(t)
        self.converged_, self.n_iter_ = bool(tf.converged), int(tf.n_iter)
        self.coef_ = np.asarray(g.beta, dtype=np.float64)
        # large-sample SE of tau² from the (restricted) likelihood information
        info = {"REML": 0.5 * g.trPP, "ML": 0.5 * g.sw2}.get(self.method_)
        self.tau2_se_ = float(np.sqrt(1.0 / info)) if info else None
        self._vcov_model = g.Ainv
        self._yPy = g.yPy
        s2 = self.typical_variance_
        self.I2_ = 100.0 * t / (t + s2) if t + s2 > 0 else 0.0
        self.H2_ = (t + s2) / s2 if s2 > 0 else 1.0
        if t == 0.0 and self.tau2 is None:
            msgs.append("tau² is estimated at its lower bound 0: no heterogeneity beyond sampling "
                        "error is detected, so I² = 0, H² = 1 and R² is not informative.")

    def _fit_nested(self, d: Design, method: str, g0: est.GLS, msgs: list[str]) -> None:
        codes, _ = pd.factorize(np.asarray(d.groups["nested"]))
        y, v, Xf = d.dense()
        k, p = d.k, d.p
        dl = max(0.0, (g0.yPy - (k - p)) / g0.trP) if g0.trP > 0 else 0.0
        mf = fit_multilevel(y, v, Xf, codes, method=method, start=dl, tol=self.tol,
                            max_iter=self.max_iter)
        self._codes, self._mf = codes, mf
        self.method_ = method
        s1, s2w = (float(x) for x in mf.sigma2)
        self.tau2_ = s1 + s2w
        col = self.nested if isinstance(self.nested, str) else "study"
        self.variance_components_ = {f"between_{col}": s1, f"within_{col}": s2w}
        self.converged_, self.n_iter_ = mf.converged, mf.n_iter
        if not mf.converged:
            msgs.append(f"Multilevel {method} did not converge ({mf.message}); increase max_iter "
                        "or simplify the model.")
        self.coef_ = mf.beta
        self.tau2_se_ = None
        self._vcov_model = mf.vcov
        self._yPy = mf.yPy
        s2 = self.typical_variance_
        tot = s1 + s2w + s2
        self.I2_ = 100.0 * (s1 + s2w) / tot if tot > 0 else 0.0
        self.I2_components_ = {f"between_{col}": 100.0 * s1 / tot if tot else 0.0,
                               f"within_{col}": 100.0 * s2w / tot if tot else 0.0}
        self.H2_ = tot / s2 if s2 > 0 else 1.0
        if len(np.unique(codes)) == k:
            msgs.append(f"Every effect has its own {col!r}: the two variance components are not "
                        "separately identified; use a model without nested=.")

    def _inference(self, d: Design, test: str, msgs: list[str]) -> None:
        k, p = d.k, d.p
        vc = np.array(self._vcov_model, dtype=np.float64)
        df: np.ndarray | None = None
        self.kh_scale_: float | None = None
        self.df_: int | None  # residual df of the t tests; None for z tests
        if self.cluster is not None:
            rf = self._robust(d)
            vc, df = rf.vcov, rf.df
            self.test_ = "t"
            self.df_ = rf.n_clusters - 1
            self.n_clusters_ = rf.n_clusters
            if test == "knapp-hartung":
                msgs.append("cluster= gives CR2 standard errors with Satterthwaite df; the "
                            "Knapp-Hartung adjustment is not applied on top of them.")
        elif test == "knapp-hartung":
            q = inf.knapp_hartung_scale(self._yPy, k, p, self.truncate_kh)
            self.kh_scale_ = q
            vc = vc * q
            df = np.full(p, float(k - p))
            self.test_, self.df_ = "t", k - p
        else:
            self.test_, self.df_ = "z", None
        self.vcov_ = vc
        self.se_ = np.sqrt(np.diag(vc))
        self._coef_arrays = inf.coef_arrays(self.coef_, self.se_, df, self.level)
        self.__dict__.pop("coefficients_", None)  # the table is built on first access
        idx = [j for j, n in enumerate(self.terms_) if n != INTERCEPT]
        self._mod_idx = idx
        if not idx:
            self.Q_M_, self.Q_M_df_, self.Q_M_p_ = None, 0, None
            return
        w = inf.wald(self.coef_, vc, idx)
        m = len(idx)
        self.Q_M_df_ = m
        if self.test_ == "z":
            self.Q_M_ = w
            self.Q_M_p_ = float(special.chdtrc(m, w))
        else:
            self.Q_M_ = w / m
            self.Q_M_p_ = float(special.fdtrc(m, self.df_, w / m))

    def _phi_blocks(self, d: Design, rows: list[np.ndarray]) -> list[np.ndarray]:
        v = np.asarray(d.v, dtype=np.float64)
        if self.nested is not None:
            return study_blocks(v, self._codes, self._mf.sigma2, rows)
        return [np.diag(v[r] + self.tau2_) for r in rows]

    def _robust(self, d: Design, kind: str = "CR2") -> inf.RobustFit:
        y, _, Xf = d.dense()
        codes, _ = pd.factorize(np.asarray(d.groups["cluster"]))
        order = np.argsort(codes, kind="stable")
        bounds = np.flatnonzero(np.diff(codes[order])) + 1
        rows = np.split(order, bounds)
        if self.nested is not None:
            pairs = pd.DataFrame({"n": self._codes, "c": codes}).drop_duplicates()
            if pairs["n"].duplicated().any():
                raise ModelError("With nested= and cluster=, every study must lie within one "
                                 "cluster; some studies span several clusters.")
        e = y - Xf @ self.coef_
        return inf.cluster_robust(Xf, e, self._phi_blocks(d, rows), rows, kind)

    # -------------------------------------------------------------- accessors
    def __getattr__(self, name: str) -> Any:
        if name.endswith("_") and not name.startswith("__"):
            if name in ("tau2_ci_", "R2_"):
                return getattr(type(self), "_lazy_" + name[:-1])(self)
            if name == "coefficients_" and "_coef_arrays" in self.__dict__:
                table = pd.DataFrame({"term": self.terms_, **self._coef_arrays})
                self.__dict__["coefficients_"] = table
                return table
            raise AttributeError(
                f"MetaRegression has no fitted attribute {name!r}: call fit(...) first."
            )
        raise AttributeError(name)

    def _check_fitted(self) -> None:
        if "_design" not in self.__dict__:
            raise ModelError("This MetaRegression is not fitted yet; call fit(...) first.")

    def _lazy_tau2_ci(self) -> tuple[float | None, float | None]:
        self._check_fitted()
        if "tau2_ci" not in self._cache:
            self._cache["tau2_ci"] = self._qprofile()
        return self._cache["tau2_ci"]

    def _qprofile(self) -> tuple[float | None, float | None]:
        d = self._design
        if self.nested is not None:
            self.warnings_.append("The Q-profile interval for tau² is defined for one variance "
                                  "component; tau2_ci is null for the multilevel model.")
            return (None, None)
        df = d.k - d.p
        a = (1.0 - self.level) / 2.0
        out = []
        for target in (stats.chi2.ppf(1 - a, df), stats.chi2.ppf(a, df)):
            t, ok, _ = est.solve_q(d, float(target), tol=1e-12, max_iter=200,
                                   use_numba=self._un, g0=self._g0)
            if not ok:
                self.warnings_.append("The Q-profile bound did not converge; tau2_ci is approximate.")
            out.append(t)
        return (out[0], out[1])

    def _lazy_R2(self) -> float | None:
        self._check_fitted()
        if "R2" in self._cache:
            return self._cache["R2"]
        r2: float | None = None
        if self._mod_idx and self._design.intercept:
            params = self.get_params() | {"moderators": None, "cluster": None, "test": "z"}
            d = self._design
            d0 = Design(d.y, d.v, d.X[:, :0], True, [INTERCEPT], d.labels, 0, [], None, d.groups)
            base = MetaRegression(**params)._fit_design(d0, emit=False)
            t0 = base.tau2_
            if self.tau2 is not None:
                r2 = None
                self.warnings_.append("R² is not computed for a fixed tau².")
            elif t0 > 0:
                r2 = max(0.0, 100.0 * (t0 - self.tau2_) / t0)
            else:
                self.warnings_.append("R² is undefined: tau² of the model without moderators is 0.")
        self._cache["R2"] = r2
        return r2

    # ---------------------------------------------------------------- outputs
    def predict(self, newdata: Any = None) -> pd.DataFrame:
        """Predicted mean effects with confidence and prediction intervals.

        Prediction intervals follow Riley, Higgins & Deeks (2011):
        ``estimate ± q · sqrt(se² + tau²)``, with the same reference distribution as
        the coefficient tests (``q`` from the normal for ``test="z"``, from t with
        ``df_`` degrees of freedom for t tests).

        Parameters
        ----------
        newdata : DataFrame or array, optional
            New moderator values (a DataFrame for formula fits, a matrix without
            the intercept column for array fits). None predicts for the fitted rows.
        """
        self._check_fitted()
        d = self._design
        if newdata is None and d.X.shape[1] == 0:
            Xn = np.ones((1, 1)) if d.intercept else np.zeros((1, 0))
        elif newdata is None:
            Xn = d.dense()[2]
        else:
            Xn = new_rows(d.spec, newdata, intercept=d.intercept, m=d.X.shape[1])
        mu = Xn @ self.coef_
        se = np.sqrt(np.einsum("ij,jk,ik->i", Xn, self.vcov_, Xn))
        a = 1.0 - (1.0 - self.level) / 2.0
        crit = stats.norm.ppf(a) if self.test_ == "z" else stats.t.ppf(a, self.df_)
        pse = np.sqrt(se**2 + self.tau2_)
        return pd.DataFrame({"estimate": mu, "se": se, "ci_low": mu - crit * se,
                             "ci_high": mu + crit * se, "pi_low": mu - crit * pse,
                             "pi_high": mu + crit * pse})

    def to_dict(self) -> dict[str, Any]:
        """The JSON contract of DESIGN.md §4 (every value JSON-safe; missing -> None)."""
        from envlink.metareg.summary import result_dict

        self._check_fitted()
        return result_dict(self)

    def summary(self) -> Any:
        """A summary that prints as a text table and renders as HTML in notebooks."""
        from envlink.metareg.summary import FitSummary

        return FitSummary(self.to_dict(), self)

    # ----------------------------------------------------------- diagnostics
    def standardized_residuals(self) -> pd.DataFrame:
        """Internally standardised residuals ``e_i / sqrt(Var e_i)`` of the marginal model."""
        from envlink.metareg.inference import standardized_residuals

        self._check_fitted()
        return standardized_residuals(self)

    def leave_one_out(self) -> pd.DataFrame:
        """Refit without each row in turn: coefficients, tau², Q_E and I² per left-out row."""
        from envlink.metareg.inference import leave_one_out

        self._check_fitted()
        return leave_one_out(self)

    def cooks_distance(self) -> pd.Series:
        """Cook's distances from the leave-one-out refits (tau² re-estimated each time)."""
        from envlink.metareg.inference import cooks_distance

        self._check_fitted()
        return cooks_distance(self)

    def permutation_test(self, n_permutations: int = 1000, seed: int | None = None, *,
                         progress: bool = True) -> inf.PermutationResult:
        """Permutation p-values for Q_M and each moderator coefficient (Higgins & Thompson 2004)."""
        from envlink.metareg.inference import run_permutations

        self._check_fitted()
        return run_permutations(self, n_permutations, seed, progress)


def meta_regression(data: pd.DataFrame, *, effect: str = "effect", variance: str = "variance",
                    moderators: str | None = None, **options: Any) -> MetaRegression:
    """Fit a :class:`MetaRegression` to a table and return it.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"e": [0.1, 0.5, 0.3, 0.9], "v": [0.04, 0.05, 0.03, 0.06]})
    >>> round(meta_regression(df, effect="e", variance="v", method="DL").tau2_, 6)
    0.056723
    """
    return MetaRegression(moderators=moderators, **options).fit(data, effect=effect,
                                                                variance=variance)
