"""A spatial random effect for point sites: exponential correlation on great-circle distance.

The model adds to a fitted meta-regression a random effect ``s`` whose correlation
between two sites decays with their great-circle distance ``d`` (km):

``y = X β + s + u + ε``, ``Cov(s) = σ²_spatial · exp(−d / ρ)``, ``u ~ N(0, tau²)``
(or the two components of the nested model), ``ε ~ N(0, v)``.

``σ²_spatial``, the range ``ρ`` (km) and the other components are estimated by REML
(or ML) with dense ``k × k`` matrices (Cholesky factor per evaluation; meant for the
hundreds to low thousands of effects of a meta-analysis), maximised by bounded
quasi-Newton steps from several starting ranges. Effects at one site are fully
correlated in ``s``. The fit is compared with the same model without ``s`` by a
likelihood ratio (its p on 2 df is approximate: ``σ²_spatial`` sits on its boundary
under the null and ``ρ`` is then not identified). Formulas: docs/methods.md.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import linalg, optimize, special

from envlink.errors import InputError, ModelError
from envlink.metareg.spatial import MAX_ROWS

__all__ = ["SpatialFit", "fit_spatial", "spatial_loglik"]


@dataclass
class SpatialFit:
    """The model with a spatial random effect (see the module docs)."""

    terms: list[str]
    coef: np.ndarray
    vcov: np.ndarray
    sigma2_spatial: float
    range_km: float
    components: dict[str, float]
    loglik: float
    loglik_without: float
    lr: float
    lr_p: float
    method: str
    k: int
    converged: bool
    notes: list[str] = field(default_factory=list)

    @property
    def table(self) -> pd.DataFrame:
        """Coefficients with z tests."""
        se = np.sqrt(np.diag(self.vcov))
        z = self.coef / se
        return pd.DataFrame({"term": self.terms, "estimate": self.coef, "se": se, "statistic": z,
                             "p": 2.0 * special.ndtr(-np.abs(z))})

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        return {"method": self.method, "k": self.k, "correlation": "exp(-distance / range)",
                "sigma2_spatial": self.sigma2_spatial, "range_km": self.range_km,
                "components": dict(self.components), "loglik": self.loglik,
                "loglik_without_spatial_effect": self.loglik_without, "lr": self.lr,
                "lr_p_approximate": self.lr_p, "converged": self.converged,
                "coefficients": self.table.to_dict("records"), "notes": list(self.notes)}

    def lines(self) -> list[str]:
        """Plain sentences for fit.txt and the report."""
        out = [f"Spatial random effect (exponential correlation on great-circle distance, "
               f"{self.method}, k = {self.k}): sigma² spatial = {self.sigma2_spatial:.4g}, "
               f"range = {self.range_km:.4g} km; likelihood ratio against the model without it "
               f"{self.lr:.3g} (p ≈ {self.lr_p:.3g}, 2 df, approximate)."]
        for r in self.table.itertuples(index=False):
            out.append(f"  {r.term}: {r.estimate:.4g} (SE {r.se:.4g}, z = {r.statistic:.3g}, "
                       f"p = {r.p:.3g})")
        return out + [f"  note: {n}" for n in self.notes]


def _distances(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    from envlink.geo import great_circle_km

    return great_circle_km(lat[:, None], lon[:, None], lat[None, :], lon[None, :])


def spatial_loglik(params: np.ndarray, y: np.ndarray, v: np.ndarray, X: np.ndarray,
                   D: np.ndarray, Z: np.ndarray | None, restricted: bool) -> tuple[float, Any]:
    """(Restricted) log-likelihood at ``(tau², σ²_spatial, log ρ[, σ²_between])``.

    ``tau²`` is the within component of a nested model (``Z`` the study indicators);
    returns the log-likelihood and ``(β, (XᵀV⁻¹X)⁻¹)``.
    """
    t2, s2, lrho = float(params[0]), float(params[1]), float(params[2])
    V = s2 * np.exp(-D / np.exp(lrho))
    V[np.diag_indices_from(V)] += v + t2
    if Z is not None:
        V += float(params[3]) * (Z @ Z.T)
    try:
        c = linalg.cho_factor(V, lower=True, check_finite=False)
    except linalg.LinAlgError:
        return -np.inf, None
    ViX = linalg.cho_solve(c, X, check_finite=False)
    Viy = linalg.cho_solve(c, y, check_finite=False)
    A = X.T @ ViX
    try:
        Ainv = np.linalg.inv(A)
    except np.linalg.LinAlgError:
        return -np.inf, None
    beta = Ainv @ (X.T @ Viy)
    r = y - X @ beta
    quad = float(r @ linalg.cho_solve(c, r, check_finite=False))
    logdet = 2.0 * float(np.log(np.diag(c[0])).sum())
    k, p = X.shape
    if restricted:
        ll = -0.5 * ((k - p) * np.log(2 * np.pi) + logdet + np.linalg.slogdet(A)[1] + quad)
    else:
        ll = -0.5 * (k * np.log(2 * np.pi) + logdet + quad)
    return ll, (beta, Ainv)


def _maximise(y, v, X, D, Z, restricted, model):  # noqa: ANN001, ANN202
    pos = D[D > 1e-3]
    lo, hi = (max(float(pos.min()) / 10.0, 1e-3), float(pos.max()) * 10.0) if pos.size else (1.0, 10.0)
    scale = max(float(np.var(y)), 1e-8)
    base = [model.tau2_ if Z is None else model.variance_components_.get(
        next(iter(model.variance_components_)), 0.0)]
    best = None
    for q in (0.1, 0.5, 0.9):
        rho0 = float(np.quantile(pos, q)) if pos.size else 1.0
        if Z is None:
            x0 = [max(base[0] / 2, 1e-4 * scale), max(base[0] / 2, 1e-4 * scale), np.log(rho0)]
        else:
            comps = list(model.variance_components_.values())
            x0 = [max(comps[1], 1e-4 * scale), max(comps[0] / 2, 1e-4 * scale), np.log(rho0),
                  max(comps[0] / 2, 1e-4 * scale)]
        bounds = [(0.0, None), (0.0, None), (np.log(lo), np.log(hi))] + ([(0.0, None)] if Z is not None else [])
        res = optimize.minimize(lambda t: -spatial_loglik(t, y, v, X, D, Z, restricted)[0], x0,
                                method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 500, "ftol": 1e-13, "gtol": 1e-9})
        if best is None or res.fun < best.fun:
            best = res
    return best


def fit_spatial(model: Any, lat: Any, lon: Any) -> SpatialFit:
    """Refit a fitted :class:`MetaRegression` with an exponential spatial random effect.

    Parameters
    ----------
    model : MetaRegression
        Fitted by REML or ML (with or without ``nested=``, without ``cluster=``).
    lat, lon : array-like
        Each input row's point site in degrees (one per input row of the fit).

    Returns
    -------
    SpatialFit
    """
    if model.method_ not in ("REML", "ML"):
        raise ModelError("The spatial random effect is estimated by REML or ML; refit the model "
                         "with method='REML' (or 'ML').")
    used = np.asarray(model.included_, dtype=bool)
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    if lat.shape[0] != used.shape[0]:
        raise InputError(f"lat/lon must give one value per input row ({used.shape[0]}); got "
                         f"{lat.shape[0]}.")
    la, lo = lat[used], lon[used]
    if not (np.isfinite(la).all() and np.isfinite(lo).all()):
        raise InputError("Every row the model used needs site coordinates for the spatial effect.")
    y, v, X = model.design_.dense()
    if y.shape[0] > MAX_ROWS // 3:
        raise ModelError(f"The spatial random effect uses dense k × k matrices; k = {y.shape[0]} "
                         f"is above the limit of {MAX_ROWS // 3}.")
    D = _distances(la, lo)
    groups = model.design_.groups.get("nested")
    Z = None
    if groups is not None:
        codes = pd.factorize(np.asarray(groups))[0]
        Z = (codes[:, None] == np.arange(codes.max() + 1)[None, :]).astype(np.float64)
    restricted = model.method_ == "REML"
    res = _maximise(y, v, X, D, Z, restricted, model)
    ll, (beta, Ainv) = spatial_loglik(res.x, y, v, X, D, Z, restricted)
    ll0 = _without(y, v, X, Z, restricted, model)
    lr = max(2.0 * (ll - ll0), 0.0)
    comps = ({"tau2": float(res.x[0])} if Z is None else
             {f"between_{model.nested}": float(res.x[3]), f"within_{model.nested}": float(res.x[0])})
    notes = [] if res.success else [f"The optimiser stopped early ({res.message})."]
    return SpatialFit(list(model.terms_), beta, Ainv, float(res.x[1]), float(np.exp(res.x[2])),
                      comps, float(ll), ll0, lr, float(special.chdtrc(2, lr)), model.method_,
                      int(y.shape[0]), bool(res.success), notes)


def _without(y, v, X, Z, restricted, model) -> float:  # noqa: ANN001
    """The same model's log-likelihood without the spatial effect (its own estimates)."""
    if Z is None:
        params = np.array([model.tau2_, 0.0, 0.0])
    else:
        comps = list(model.variance_components_.values())
        params = np.array([comps[1], 0.0, 0.0, comps[0]])
    D0 = np.zeros((y.shape[0], y.shape[0]))
    return float(spatial_loglik(params, y, v, X, D0, Z, restricted)[0])
