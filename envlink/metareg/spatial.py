"""Spatial dependence of a fitted model's residuals: Moran's I, a correlogram, shared grid cells.

Nearby sites share water and weather, so a model's residuals may be alike at short
distance, and then the model's standard errors are too small. :func:`residual_moran`
computes Moran's I (Cliff & Ord 1981) of the fitted model's standardised residuals,

``I = (n / S₀) · Σᵢⱼ wᵢⱼ zᵢ zⱼ / Σᵢ zᵢ²`` (``z`` centred, ``S₀ = Σᵢⱼ wᵢⱼ``),

with weights of :data:`~envlink.metareg.spatial_weights.SPATIAL_WEIGHTS` on
great-circle distances, its null mean ``−1 / (n − 1)``, its variance under
normality (Cliff & Ord 1981) and a one-sided permutation p (rows' residuals
permuted; ``p = (1 + #{I* ≥ I}) / (1 + n)``). :func:`correlogram` gives I by
distance band. :func:`shared_cells` counts the sites that took their covariate
from one grid cell (their covariate values are not independent).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from envlink.errors import InputError, ModelError
from envlink.metareg.spatial_weights import SAME_PLACE_KM, SPATIAL_WEIGHTS, weights_matrix

__all__ = ["MoranResult", "moran_i", "moran_test", "residual_moran", "Correlogram",
           "correlogram", "SharedCells", "shared_cells", "MAX_ROWS", "SHARED_FLAG"]

#: largest number of rows the dense distance matrix is built for
MAX_ROWS = 6000
#: QA code of a row whose site shares its grid cell with another site (added to ``C_flags``)
SHARED_FLAG = "shared_grid_cell"


@dataclass
class MoranResult:
    """Moran's I of residuals, with its null mean and two p-values (see the module docs)."""

    I: float  # noqa: E741 - the statistic's name
    expected: float
    variance: float
    z: float
    p_normal: float
    p_permutation: float | None
    n_permutations: int
    n: int
    weights: str
    same_place_pairs: int
    model: str = ""
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        out = {k: getattr(self, k) for k in ("I", "expected", "variance", "z", "p_normal",
                                             "p_permutation", "n_permutations", "n", "weights",
                                             "same_place_pairs", "model")}
        out["alternative"] = "positive spatial autocorrelation (one-sided)"
        out["notes"] = list(self.notes)
        return {k: (None if isinstance(v, float) and not np.isfinite(v) else v)
                for k, v in out.items()}

    def line(self) -> str:
        """One sentence for fit.txt and the report."""
        pp = "-" if self.p_permutation is None else f"{self.p_permutation:.4g}"
        return (f"Moran's I of the standardised residuals ({self.weights} weights, n = {self.n}; "
                f"{self.model}): I = {self.I:.4g} (null mean {self.expected:.4g}), z = "
                f"{self.z:.3g}, p = {self.p_normal:.4g} (normal), {pp} (permutation, "
                f"{self.n_permutations}); one-sided, positive autocorrelation.")


def _sums(W: Any) -> tuple[float, float, float]:
    """S₀, S₁, S₂ of Cliff & Ord (1981)."""
    Wd = W.tocsr()
    S0 = float(Wd.sum())
    sym = Wd + Wd.T
    S1 = 0.5 * float(sym.multiply(sym).sum())
    S2 = float(((np.asarray(Wd.sum(axis=1)).ravel() + np.asarray(Wd.sum(axis=0)).ravel()) ** 2).sum())
    return S0, S1, S2


def moran_i(values: np.ndarray, W: Any) -> float:
    """Moran's I of ``values`` under the (sparse or dense) weights ``W``.

    Examples
    --------
    >>> W = np.array([[0, 1, 0], [1, 0, 1], [0, 1, 0]], dtype=float)
    >>> round(moran_i(np.array([1.0, 2.0, 1.0]), W), 6)   # (3/4) * (-8/9) / (6/9)
    -1.0
    """
    z = np.asarray(values, dtype=np.float64)
    z = z - z.mean()
    S0 = float(W.sum())
    return float(len(z) / S0 * (z @ (W @ z)) / (z @ z))


def moran_test(values: np.ndarray, W: Any, *, n_permutations: int = 999, seed: int | None = None,
               weights: str = "", same_place_pairs: int = 0) -> MoranResult:
    """Moran's I with its normality variance (Cliff & Ord 1981) and a permutation p."""
    z = np.asarray(values, dtype=np.float64)
    n = z.shape[0]
    if n < 4:
        raise ModelError(f"Moran's I needs at least 4 rows with residuals and coordinates; got {n}.")
    S0, S1, S2 = _sums(W)
    if S0 <= 0:
        raise ModelError("No pair of distinct sites has a spatial weight; Moran's I is undefined "
                         "(widen the distance limit or use knn:N).")
    I = moran_i(z, W)  # noqa: E741
    E = -1.0 / (n - 1)
    var = (n * n * S1 - n * S2 + 3.0 * S0 * S0) / ((n * n - 1.0) * S0 * S0) - E * E
    zs = (I - E) / np.sqrt(var) if var > 0 else np.nan
    p_norm = float(special.ndtr(-zs)) if np.isfinite(zs) else np.nan
    p_perm = None
    if n_permutations:
        rng = np.random.default_rng(seed)
        c = z - z.mean()
        ge, done = 0, 0
        while done < n_permutations:
            b = min(500, n_permutations - done)
            Z = c[np.argsort(rng.random((b, n)), axis=1)].T  # (n, b)
            Ib = n / S0 * np.einsum("nb,nb->b", Z, np.asarray(W @ Z)) / (c @ c)
            ge += int((Ib >= I - 1e-12 * abs(I)).sum())
            done += b
        p_perm = (1 + ge) / (1 + n_permutations)
    return MoranResult(I, E, float(var), float(zs), p_norm, p_perm, int(n_permutations), n,
                       weights, same_place_pairs)


def _rows(model: Any, lat: Any, lon: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Standardised residuals and coordinates of the rows the model used."""
    resid = model.standardized_residuals()
    used = ~resid["dropped"].to_numpy(dtype=bool)
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    if lat.shape[0] != used.shape[0]:
        raise InputError(f"lat/lon must give one value per input row of the model "
                         f"({used.shape[0]}); got {lat.shape[0]}.")
    z = resid["z"].to_numpy(dtype=np.float64)
    ok = used & np.isfinite(z) & np.isfinite(lat) & np.isfinite(lon)
    return z[ok], lat[ok], lon[ok]


def _model_words(model: Any) -> str:
    mods = getattr(model, "moderators", None) or "no moderators"
    nested = f", nested in {model.nested}" if getattr(model, "nested", None) else ""
    return f"residuals of the fitted {model.method_} model ({mods}{nested})"


def residual_moran(model: Any, lat: Any, lon: Any, *, weights: str = "knn:6",
                   n_permutations: int = 999, seed: int | None = None) -> MoranResult:
    """Moran's I of a fitted model's standardised residuals (rows the model used).

    Parameters
    ----------
    model : MetaRegression
        Fitted.
    lat, lon : array-like
        Each input row's site (degrees), one per input row of the fit.
    weights : str
        A name of :data:`~envlink.metareg.spatial_weights.SPATIAL_WEIGHTS`.
    n_permutations, seed
        The permutation p (0: only the normal approximation).
    """
    z, la, lo = _rows(model, lat, lon)
    if z.shape[0] > MAX_ROWS:
        raise ModelError(f"Moran's I is computed for up to {MAX_ROWS} rows (a dense distance "
                         f"matrix); this model has {z.shape[0]}.")
    W, same = weights_matrix(la, lo, weights)
    r = moran_test(z, W, n_permutations=n_permutations, seed=seed,
                   weights=SPATIAL_WEIGHTS.parse(weights).label(), same_place_pairs=same)
    r.model = _model_words(model)
    if same:
        r.notes.append(f"{same} ordered pairs of rows share a site and get no weight; dependence "
                       "within a site is the nested model's to describe.")
    return r


@dataclass
class Correlogram:
    """Moran's I by distance band: ``table`` has from_km, to_km, pairs, I, expected, p."""

    table: pd.DataFrame
    model: str = ""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        rows = [{k: (None if isinstance(v, float) and not np.isfinite(v) else v)
                 for k, v in r.items()} for r in self.table.to_dict("records")]
        return {"bands": rows, "model": self.model,
                "weights": "1 for pairs of distinct sites within the band"}


def correlogram(values: np.ndarray, lat: Any, lon: Any, *, bands: int = 6,
                n_permutations: int = 199, seed: int | None = None) -> Correlogram:
    """Moran's I in distance bands of equal numbers of site pairs (binary weights per band)."""
    from scipy import sparse

    from envlink.geo import great_circle_km

    z = np.asarray(values, dtype=np.float64)
    la = np.asarray(lat, dtype=np.float64)
    lo = np.asarray(lon, dtype=np.float64)
    d = great_circle_km(la[:, None], lo[:, None], la[None, :], lo[None, :])
    iu = np.triu_indices(z.shape[0], 1)
    pair = d[iu][d[iu] >= SAME_PLACE_KM]
    if pair.size < bands:
        raise ModelError("Too few pairs of distinct sites for a correlogram.")
    edges = np.unique(np.quantile(pair, np.linspace(0.0, 1.0, bands + 1)))
    rows = []
    for b, (a, c) in enumerate(zip(edges[:-1], edges[1:], strict=True)):
        last = b == len(edges) - 2
        inband = (d >= max(a, SAME_PLACE_KM)) & ((d <= c) if last else (d < c))
        np.fill_diagonal(inband, False)
        W = sparse.csr_matrix(inband.astype(np.float64))
        r = moran_test(z, W, n_permutations=n_permutations, seed=seed)
        rows.append({"from_km": float(a), "to_km": float(c), "pairs": int(inband.sum() // 2),
                     "I": r.I, "expected": r.expected, "z": r.z,
                     "p": r.p_permutation if r.p_permutation is not None else r.p_normal})
    return Correlogram(pd.DataFrame(rows))


@dataclass
class SharedCells:
    """Sites that took a covariate from the same grid cell."""

    covariate: str
    cells_shared: int  # grid cells used by more than one distinct site
    sites_sharing: int  # distinct sites in such cells
    rows_sharing: int
    flag: np.ndarray  # per input row: its cell is shared with another site

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary (without the per-row flags)."""
        return {"covariate": self.covariate, "cells_shared": self.cells_shared,
                "sites_sharing": self.sites_sharing, "rows_sharing": self.rows_sharing,
                "flag": SHARED_FLAG}

    def line(self) -> str:
        """One sentence for fit.txt and the report ("" when no cell is shared)."""
        if not self.cells_shared:
            return ""
        return (f"Shared grid cells: {self.sites_sharing} sites took {self.covariate} from "
                f"{self.cells_shared} shared cell(s) ({self.rows_sharing} rows, flagged "
                f"{SHARED_FLAG}); their covariate values are not independent.")


def shared_cells(table: pd.DataFrame, covariate: str) -> SharedCells:
    """Count distinct sites whose covariate came from one grid cell (``C_cell_lat/lon``).

    Examples
    --------
    >>> t = pd.DataFrame({"site_lat": [1.0, 1.1, 5.0], "site_lon": [2.0, 2.0, 2.0],
    ...                   "x_cell_lat": [1.0, 1.0, 5.0], "x_cell_lon": [2.0, 2.0, 2.0]})
    >>> s = shared_cells(t, "x")
    >>> s.cells_shared, s.sites_sharing, s.flag.tolist()
    (1, 2, [True, True, False])
    """
    need = ["site_lat", "site_lon", f"{covariate}_cell_lat", f"{covariate}_cell_lon"]
    missing = [c for c in need if c not in table.columns]
    if missing:
        raise InputError(f"shared_cells needs the columns {', '.join(missing)} (from locate and "
                         "attach).")
    t = table[need].apply(pd.to_numeric, errors="coerce").round(6)
    ok = t.notna().all(axis=1)
    cell = t[need[2]].astype(str) + "," + t[need[3]].astype(str)
    site = t[need[0]].astype(str) + "," + t[need[1]].astype(str)
    sites_per_cell = site[ok].groupby(cell[ok]).nunique()
    shared = set(sites_per_cell.index[sites_per_cell > 1])
    flag = (ok & cell.isin(shared)).to_numpy()
    return SharedCells(covariate, len(shared), int(site[flag].nunique()), int(flag.sum()), flag)
