"""The mixed-effects meta-regression estimator: ``MetaRegression`` and ``meta_regression``.

Effects ``y_i`` with known sampling variances ``v_i`` follow
``y_i = x_iᵀ β + u_i + ε_i``, ``u_i ~ N(0, tau²)``, ``ε_i ~ N(0, v_i)``; with
``nested=`` the heterogeneity splits into a between-study and a within-study
component. Formulas and citations: docs/methods.md.
"""

from __future__ import annotations

import inspect
import os
import warnings
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from envlink.core.util import did_you_mean
from envlink.errors import (
    InputError,
    MetaRegressionWarning,
    ModelError,
    NotFittedError,
    TooFewRowsError,
    param_error,
    user_stacklevel,
)
from envlink.metareg import estimators as est
from envlink.metareg import inference as inf
from envlink.metareg.attributes import Derived, Fitted, option_error
from envlink.metareg.design import Design, design_from_arrays, design_from_frame
from envlink.metareg.fitting import coefficient_tests, fit_heterogeneity
from envlink.metareg.formula import INTERCEPT, moderator_positions, rows_text
from envlink.metareg.frame import ModelFrame, model_frame
from envlink.metareg.lockstep import request_for
from envlink.metareg.results import prediction_df, prediction_table, pseudo_r2, qprofile_interval
from envlink.metareg.vocabulary import ESTIMATORS, TESTS, multilevel_names

__all__ = ["MetaRegression", "meta_regression", "MetaRegressionWarning"]


def _use_numba() -> bool:
    return os.environ.get("ENVLINK_NUMBA", "1") != "0"


class MetaRegression:
    """Mixed-effects meta-regression with known sampling variances.

    Every parameter is keyword-only and stored as given; ``fit()`` checks them.
    ``get_params()`` / ``set_params()`` follow the scikit-learn estimator contract;
    ``set_params()`` on a fitted model discards the fit (the model is unfitted again).

    Parameters
    ----------
    method : str, default "REML"
        Estimator of tau² (ignored when ``tau2`` is given): a name of
        :data:`~envlink.metareg.vocabulary.ESTIMATORS`, ``"REML"``, ``"ML"``, ``"DL"``,
        ``"PM"``, ``"HE"`` or ``"SJ"`` (any case; descriptive aliases such as
        ``"dersimonian-laird"``). Multilevel models (``nested=``) use REML or ML.
    test : str, default "z"
        ``"z"`` (normal-theory tests) or ``"knapp-hartung"`` (alias ``"hartung-knapp"``):
        Knapp-Hartung t and F tests with k - p df.
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
        Convergence on the change of tau² relative to ``max(tau², typical sampling
        variance)``.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"effect": [0.1, 0.5, 0.3, 0.9, 0.6],
    ...                    "variance": [0.04, 0.05, 0.03, 0.06, 0.05],
    ...                    "x": [1.0, 2.0, 3.0, 4.0, 5.0]})
    >>> m = MetaRegression(moderators="x").fit(df)
    >>> [round(float(b), 4) for b in m.coef_]
    [0.0345, 0.1384]
    >>> m.set_params(method="dl").method, hasattr(m, "coef_")
    ('dl', False)
    """

    design_ = Fitted("The fitted :class:`~envlink.metareg.design.Design` (the rows used).")
    k_ = Fitted("Number of effects used.")
    p_ = Fitted("Number of coefficients.")
    n_dropped_ = Fitted("Number of input rows left out of the fit.")
    terms_ = Fitted("Coefficient names, ``'intercept'`` first when there is one.")
    method_ = Fitted("The tau² estimator's canonical label (``'REML'``, ...), or ``'fixed'``.")
    tau2_ = Fitted("tau² (the sum of the components of a multilevel model).")
    tau2_se_ = Fitted("Large-sample SE of tau² (REML and ML without nested=), else None.")
    converged_ = Fitted("Whether the tau² estimation converged.")
    n_iter_ = Fitted("Iterations of the tau² estimation.")
    coef_ = Fitted("Coefficient estimates, in the order of ``terms_``.")
    vcov_model_ = Fitted("Model-based covariance of the coefficients, ``(XᵀWX)⁻¹``.")
    vcov_ = Fitted("Covariance of the coefficients used by the tests (Knapp-Hartung-scaled, or CR2).")
    se_ = Fitted("Standard errors of the coefficients (from ``vcov_``).")
    test_ = Fitted("``'z'`` or ``'t'``: the reference distribution of the tests.")
    df_ = Fitted("Residual df of the t tests (k - p, or clusters - 1); None for z tests.")
    kh_scale_ = Fitted("The Knapp-Hartung scale q, or None.")
    Q_E_ = Fitted("Residual heterogeneity statistic Q_E.")
    Q_E_df_ = Fitted("Degrees of freedom of Q_E (k - p).")
    Q_E_p_ = Fitted("p-value of Q_E.")
    Q_M_ = Fitted("Omnibus test of the moderators (chi² under z, F under t), or None.")
    Q_M_df_ = Fitted("Number of coefficients Q_M tests.")
    Q_M_p_ = Fitted("p-value of Q_M, or None.")
    I2_ = Fitted("I² in per cent.")
    H2_ = Fitted("H².")
    typical_variance_ = Fitted("The typical sampling variance ``(k - p) / tr P₀``.")
    variance_components_ = Fitted("Variance components of a multilevel model (empty otherwise).")
    warnings_ = Fitted("Notes of the fit itself (see ``notes_`` for those of derived statistics).")

    def __init__(self, *, method: str = "REML", test: str = "z", tau2: float | None = None,
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
    @classmethod
    def _param_names(cls) -> list[str]:
        sig = inspect.signature(cls.__init__)
        return [n for n, p in sig.parameters.items() if p.kind is p.KEYWORD_ONLY]

    def get_params(self, deep: bool = True) -> dict[str, Any]:
        """The constructor's parameters, as given (``deep`` has nothing nested to add).

        Examples
        --------
        >>> MetaRegression(method="ML").get_params()["method"]
        'ML'
        """
        return {k: getattr(self, k) for k in self._param_names()}

    def set_params(self, **params: Any) -> MetaRegression:
        """Set parameters by name and return ``self``; a fitted model becomes unfitted.

        Raises
        ------
        InputError
            An unknown parameter name (nothing is changed then).
        """
        names = self._param_names()
        for key in params:
            if key not in names:
                raise InputError(str(param_error(
                    "**params", "MetaRegression.set_params",
                    "parameter names of MetaRegression (" + ", ".join(names) + ")", key))
                    + did_you_mean(key, names))
        self._reset()
        for key, value in params.items():
            setattr(self, key, value)
        return self

    def _reset(self) -> None:
        """Forget a previous fit: every attribute that is not a parameter."""
        keep = set(self._param_names())
        for key in [k for k in self.__dict__ if k not in keep]:
            del self.__dict__[key]

    def _options(self) -> tuple[str, str]:
        caller = "MetaRegression"
        method = ESTIMATORS.parse(self.method).entry
        test = TESTS.parse(self.test).entry
        if not (isinstance(self.level, float | int) and 0 < self.level < 1):
            raise param_error("level", caller, "a number between 0 and 1", self.level)
        if self.tau2 is not None and not (np.isfinite(self.tau2) and self.tau2 >= 0):
            raise param_error("tau2", caller, "None or a finite number >= 0", self.tau2)
        if not (isinstance(self.max_iter, int) and self.max_iter >= 1):
            raise param_error("max_iter", caller, "an integer >= 1", self.max_iter)
        if not (self.tol > 0):
            raise param_error("tol", caller, "a positive number", self.tol)
        if self.nested is not None and not method.info.get("multilevel"):
            raise param_error("method", caller,
                              f"{multilevel_names()} for a nested (multilevel) model", self.method)
        if self.nested is not None and self.tau2 is not None:
            raise param_error("tau2", caller, "None for a nested (multilevel) model", self.tau2)
        return method.name, test.name

    # --------------------------------------------------------------------- fit
    def fit(self, data: pd.DataFrame | ModelFrame | Design | None = None, *, effect: str = "effect",
            variance: str = "variance", y: Any = None, v: Any = None,
            X: Any = None) -> MetaRegression:
        """Fit the model to a table (with the ``moderators`` formula), to arrays, or to a design.

        Parameters
        ----------
        data : DataFrame, ModelFrame or Design, optional
            The table; ``effect`` and ``variance`` name its columns, and
            :func:`~envlink.metareg.frame.model_frame` chooses its rows (``included_``).
            A :class:`~envlink.metareg.frame.ModelFrame` made with this model's
            options, or a :class:`~envlink.metareg.design.Design` (e.g. rows of a
            fitted model's ``design_``), is fitted as it is.
        y, v, X : arrays, optional
            Effects, sampling variances and moderator matrix (without the intercept
            column), NumPy or Dask, used when ``data`` is None. float32 storage is
            summed in float64. ``nested`` / ``cluster`` may then be label arrays.

        Returns
        -------
        MetaRegression
            ``self``, fitted.
        """
        self._options()
        if data is not None and (y is not None or v is not None or X is not None):
            raise InputError("Give either data= (a table) or y=, v=, X= arrays, not both.")
        if isinstance(data, Design):
            d = data
        elif isinstance(data, ModelFrame):
            data.check_options(self.moderators, self.nested, self.cluster)
            d = design_from_frame(data, intercept=self.intercept)
        elif data is not None:
            for role in ("nested", "cluster"):
                if getattr(self, role) is not None and not isinstance(getattr(self, role), str):
                    raise InputError(f"With data=, {role!r} must be a column name.")
            frame = model_frame(data, effect=effect, variance=variance, moderators=self.moderators,
                                nested=self.nested, cluster=self.cluster, intercept=self.intercept)
            d = design_from_frame(frame, intercept=self.intercept)
        else:
            if y is None or v is None:
                raise InputError("fit() needs data= (a table) or both y= and v= arrays.")
            if self.moderators:
                raise InputError("A moderators formula needs data= (a table); with arrays pass X=.")
            groups = {"nested": self.nested, "cluster": self.cluster}
            d = design_from_arrays(y, v, X, intercept=self.intercept, groups=groups)
        return self._fit_design(d, emit=True)

    def _fit_design(self, d: Design, emit: bool) -> MetaRegression:
        method, test = self._options()
        self._reset()
        k, p = d.k, d.p
        if p == 0:
            raise ModelError("The model has no coefficients: keep the intercept or add moderators.")
        if k <= p:
            raise TooFewRowsError(
                f"Only k = {k} usable effects for p = {p} coefficients; a meta-regression "
                f"needs more effects than coefficients (k > p). Use fewer moderators."
            )
        msgs: list[str] = []
        if d.n_dropped:
            gone = np.flatnonzero(~d.keep) if d.keep is not None else np.asarray(d.dropped_labels)
            msgs.append(f"{d.n_dropped} row(s) dropped for {d.drop_reason} "
                        f"({rows_text(gone, d.all_labels)}).")
        self._use_numba = _use_numba()
        s0 = est.checked_sums(d, self._use_numba)
        g0 = est.gls(s0, 0.0)
        self._g0 = g0
        s2typ = (k - p) / g0.trP if g0.trP > 0 else 0.0
        if float(g0.yPy) <= 1e-12 * max(1.0, abs(s0.syy1)):
            msgs.append("All effects are fitted exactly (Q_E = 0, e.g. identical effects): "
                        "tau² is 0 and I² is 0; heterogeneity cannot be assessed.")
        together = request_for(d, level=self.level, nested=self.nested, tau2=self.tau2, s0=s0)
        h = fit_heterogeneity(d, method=method, tau2=self.tau2, nested=self.nested, g0=g0,
                              typical_variance=s2typ, tol=self.tol, max_iter=self.max_iter,
                              use_numba=self._use_numba, together=together)
        self._together = h.together
        msgs.extend(h.messages)
        last = msgs[-1] if msgs else "The fit did not converge."
        terms = list(d.names)
        t = coefficient_tests(d, h, terms, test=test, clustered=self.cluster is not None,
                              truncate=self.truncate_kh, level=self.level)
        msgs.extend(t.messages)
        self.design_ = d
        self.k_, self.p_, self.n_dropped_, self.terms_ = k, p, d.n_dropped, terms
        self.Q_E_, self.Q_E_df_ = float(g0.yPy), k - p
        self.Q_E_p_ = float(special.chdtrc(k - p, self.Q_E_))
        self.typical_variance_ = s2typ
        self.method_, self.tau2_, self.tau2_se_ = h.method, h.tau2, h.tau2_se
        self.converged_, self.n_iter_ = h.converged, h.n_iter
        self.coef_, self.vcov_model_ = h.coef, h.vcov_model
        self.I2_, self.H2_, self.variance_components_ = h.I2, h.H2, h.variance_components
        self._I2_components, self._n_clusters = h.I2_components, t.n_clusters
        self.vcov_, self.se_, self._coef_arrays = t.scale.vcov, t.se, t.coef_arrays
        self.test_, self.df_, self.kh_scale_ = t.scale.test, t.scale.df_resid, t.scale.kh_scale
        self.Q_M_, self.Q_M_df_, self.Q_M_p_ = t.Q_M, t.Q_M_df, t.Q_M_p
        self.warnings_ = msgs
        if not self.converged_ and emit:
            warnings.warn(last, MetaRegressionWarning, stacklevel=user_stacklevel())
        if d.n_dropped and emit:
            warnings.warn(msgs[0], MetaRegressionWarning, stacklevel=user_stacklevel())
        return self

    # -------------------------------------------------- derived statistics
    def _check_fitted(self) -> None:
        if "design_" not in self.__dict__:
            raise NotFittedError("This MetaRegression is not fitted yet; call fit(...) first.")

    @cached_property
    def coefficients_(self) -> pd.DataFrame:
        """Coefficient table: term, estimate, se, statistic, p, ci_low, ci_high, df."""
        self._check_fitted()
        return pd.DataFrame({"term": self.terms_, **self._coef_arrays})

    @cached_property
    def _tau2_ci(self) -> Derived[tuple[float | None, float | None]]:
        self._check_fitted()
        return qprofile_interval(self.design_, level=self.level, multilevel=self.nested is not None,
                                 use_numba=self._use_numba, g0=self._g0, together=self._together)

    @property
    def tau2_ci_(self) -> tuple[float | None, float | None]:
        """Q-profile confidence interval of tau² (Viechtbauer 2007); None bounds for nested=."""
        return self._tau2_ci.value

    @cached_property
    def _R2(self) -> Derived[float | None]:
        self._check_fitted()
        d = self.design_
        if not (moderator_positions(self.terms_) and d.intercept):
            return Derived(None)
        if self.tau2 is not None:
            return pseudo_r2(fixed=True, base_tau2=None, tau2=self.tau2_)
        if self._together is not None and self._together.base_tau2 is not None:
            return pseudo_r2(fixed=False, base_tau2=self._together.base_tau2, tau2=self.tau2_)
        params = self.get_params() | {"moderators": None, "cluster": None, "test": "z"}
        d0 = Design(d.y, d.v, d.X[:, :0], True, [INTERCEPT], d.labels, 0, [], None, d.groups)
        base = MetaRegression(**params)._fit_design(d0, emit=False)
        return pseudo_r2(fixed=False, base_tau2=base.tau2_, tau2=self.tau2_)

    @property
    def R2_(self) -> float | None:
        """Pseudo-R² in per cent (Raudenbush 2009); None without moderators (see ``notes_``)."""
        return self._R2.value

    @property
    def included_(self) -> np.ndarray:
        """Whether each input row entered the fit (bool, one per input row)."""
        self._check_fitted()
        d = self.design_
        return np.asarray(d.keep) if d.keep is not None else np.ones(d.k, dtype=bool)

    @property
    def notes_(self) -> list[str]:
        """Every note: the fit's (``warnings_``), then those of ``tau2_ci_`` and ``R2_``."""
        self._check_fitted()
        return [*self.warnings_, *self._tau2_ci.notes, *self._R2.notes]

    @property
    def I2_components_(self) -> dict[str, float]:
        """I² of each variance component of the multilevel model (needs ``nested=``)."""
        self._check_fitted()
        if self._I2_components is None:
            raise option_error("I2_components_", "nested=COLUMN (effects nested in studies)")
        return self._I2_components

    @property
    def n_clusters_(self) -> int:
        """Number of clusters of the CR2 tests (needs ``cluster=``)."""
        self._check_fitted()
        if self._n_clusters is None:
            raise option_error("n_clusters_", "cluster=COLUMN (cluster-robust tests)")
        return self._n_clusters

    # ---------------------------------------------------------------- outputs
    def predict(self, newdata: Any = None, *, prediction: str = "tests") -> pd.DataFrame:
        """Predicted mean effects with confidence and prediction intervals.

        Prediction intervals ``estimate ± q · sqrt(se² + tau²)`` (Riley, Higgins & Deeks
        2011); ``prediction`` (:data:`~envlink.metareg.vocabulary.PREDICTION_INTERVALS`)
        chooses ``q``: ``"tests"`` the distribution of the coefficient tests (normal for
        ``test="z"``, t with ``df_`` df), ``"riley"`` t with k - p - 1 df (k - 2 without
        moderators). ``newdata``: new moderator values (a DataFrame for formula fits, a
        matrix without the intercept column for array fits); None predicts for the
        fitted rows.
        """
        self._check_fitted()
        pi_df = prediction_df(prediction, k=self.k_, p=self.p_, df=self.df_)
        return prediction_table(self.design_, newdata, coef=self.coef_, vcov=self.vcov_,
                                tau2=self.tau2_, df=self.df_, level=self.level, pi_df=pi_df)

    def to_dict(self) -> dict[str, Any]:
        """The JSON result (every value JSON-safe; missing -> None); the same whatever was read before."""
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
        self._check_fitted()
        return inf.standardized_residuals(self)

    @cached_property
    def _loo(self) -> list[Any]:
        self._check_fitted()
        return inf.leave_one_out_fits(self)

    def leave_one_out(self) -> pd.DataFrame:
        """Refit without each row in turn: coefficients, tau², Q_E and I² per left-out row."""
        return inf.leave_one_out(self, self._loo)

    def cooks_distance(self) -> pd.Series:
        """Cook's distances from the leave-one-out refits (tau² re-estimated each time)."""
        return inf.cooks_distance(self, self._loo)

    def permutation_test(self, n_permutations: int = 1000, seed: int | None = None, *,
                         scheme: str | None = None,
                         progress: bool | None = True) -> inf.PermutationResult:
        """Permutation p of each moderator term and of Q_M (:mod:`envlink.metareg.permutation`).

        ``scheme``: ``rows``, ``within`` or ``blocks`` (default ``within`` with ``nested=``).
        """
        self._check_fitted()
        return inf.run_permutations(self, n_permutations, seed, progress, scheme)


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
