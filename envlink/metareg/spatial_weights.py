"""Spatial weights between effects for residual checks: one registry, great-circle distances.

:data:`SPATIAL_WEIGHTS` names how neighbouring effects are weighted in Moran's I
(the API's ``weights=``, ``envlink fit --spatial``, the project file's
``[checks] spatial`` and the docs read it):

- ``inverse-distance[:Dkm]``: ``w_ij = 1 / d_ij`` (km), optionally only for pairs
  closer than D km;
- ``knn:N``: ``w_ij = 1`` for the N nearest other sites of row i (asymmetric).

Distances are great-circle distances on the IUGG mean sphere (:mod:`envlink.geo`).
Pairs of rows at the same place (closer than 1 m) get no weight: dependence among
effects of one site is the nested model's business, and their count is reported.
:func:`weights_matrix` builds the sparse matrix. This module imports NumPy and SciPy
only when building, so the command line reads the registry cheaply.

Examples
--------
>>> SPATIAL_WEIGHTS.parse("KNN:6").label(), SPATIAL_WEIGHTS.parse("inverse_distance:500").label()
('knn:6', 'inverse-distance:500km')
"""

from __future__ import annotations

from typing import Any

from envlink.core.registry import Arg, Entry, Registry

__all__ = ["SPATIAL_WEIGHTS", "weights_matrix", "SAME_PLACE_KM"]

#: rows closer than this (km) are at the same place
SAME_PLACE_KM = 1e-3


def _count(form: str) -> Arg:
    def read(text: str) -> int | None:
        try:
            n = int(text.strip())
        except ValueError:
            return None
        return n if n >= 1 else None

    return Arg(form, read, str, f"{form} a whole number >= 1")


def _optional_km() -> Arg:
    base = Arg.distance_km("D")
    return Arg(base.form, base.read, base.show, base.expected, optional=True)


SPATIAL_WEIGHTS: Registry[Any] = Registry("spatial weights", param="weights",
                                          caller="spatial_check")
SPATIAL_WEIGHTS.add(Entry(
    "inverse-distance", "1 / distance (km) between sites, optionally only within D km",
    arg=_optional_km(), aliases=("idw",), info={"words": "inverse great-circle distance"}))
SPATIAL_WEIGHTS.add(Entry(
    "knn", "1 for each of the N nearest other sites (great-circle)", arg=_count("N"),
    info={"words": "nearest neighbours"}))


def weights_matrix(lat: Any, lon: Any, weights: str) -> tuple[Any, int]:
    """The sparse ``(n, n)`` weights and the number of same-place pairs left out.

    Examples
    --------
    >>> import numpy as np
    >>> W, same = weights_matrix(np.array([0.0, 0.0, 0.0]), np.array([0.0, 1.0, 1.0]), "knn:1")
    >>> W.toarray().tolist(), same
    ([[0.0, 1.0, 0.0], [1.0, 0.0, 0.0], [1.0, 0.0, 0.0]], 2)
    """
    import numpy as np
    from scipy import sparse

    from envlink.geo import great_circle_km

    choice = SPATIAL_WEIGHTS.parse(weights)
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    n = lat.shape[0]
    d = great_circle_km(lat[:, None], lon[:, None], lat[None, :], lon[None, :])
    same = d < SAME_PLACE_KM
    np.fill_diagonal(same, False)
    n_same = int(same.sum())
    far = np.where(same | np.eye(n, dtype=bool), np.inf, d)
    if choice.name == "knn":
        kk = min(int(choice.value), n - 1)
        nearest = np.argsort(far, axis=1, kind="stable")[:, :kk]
        rows = np.repeat(np.arange(n), kk)
        cols = nearest.ravel()
        keep = np.isfinite(far[rows, cols])
        W = sparse.csr_matrix((np.ones(int(keep.sum())), (rows[keep], cols[keep])), shape=(n, n))
    else:
        limit = np.inf if choice.value is None else float(choice.value)
        with np.errstate(divide="ignore"):
            w = np.where(np.isfinite(far) & (far <= limit), 1.0 / far, 0.0)
        W = sparse.csr_matrix(w)
    return W, n_same
