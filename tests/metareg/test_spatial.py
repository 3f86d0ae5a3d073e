"""Spatial checks: Moran's I, its null mean, weights, shared cells, the spatial random effect.

Sources: Cliff & Ord (1981), Spatial Processes: the definition of I, its null mean
−1/(n − 1) (exact over all permutations of the values) and its variance under
normality; a hand computation of I for a 4-site line; a dense NumPy formula for I
written here; great-circle distances by the haversine formula (checked in
test_geo.py against pyproj); the spatial random effect's REML against an independent
scipy Nelder-Mead maximisation of the dense restricted likelihood written here.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import optimize

from envlink.errors import ModelError
from envlink.geo import great_circle_km
from envlink.metareg import MetaRegression
from envlink.metareg.spatial import correlogram, moran_i, moran_test, residual_moran, shared_cells
from envlink.metareg.spatial_re import fit_spatial
from envlink.metareg.spatial_weights import weights_matrix


def test_moran_hand_computation():
    # four sites on a line, rook neighbours: w12 = w21 = w23 = w32 = w34 = w43 = 1
    W = np.zeros((4, 4))
    for i in range(3):
        W[i, i + 1] = W[i + 1, i] = 1.0
    x = np.array([1.0, 2.0, 4.0, 5.0])  # mean 3: z = -2, -1, 1, 2; Σz² = 10
    # Σ w z z = 2 (z1 z2 + z2 z3 + z3 z4) = 2 (2 - 1 + 2) = 6 ; S0 = 6 ; I = 4/6 * 6/10
    assert_allclose(moran_i(x, W), 0.4, rtol=1e-14)


def test_null_mean_by_full_enumeration_and_dense_formula():
    rng = np.random.default_rng(0)
    x = rng.normal(size=6)
    lat, lon = rng.uniform(-5, 5, 6), rng.uniform(100, 110, 6)
    W, _ = weights_matrix(lat, lon, "inverse-distance")
    Wd = W.toarray()
    # the mean of I over all 720 arrangements of the values is exactly -1/(n - 1)
    vals = [moran_i(x[list(p)], Wd) for p in itertools.permutations(range(6))]
    assert_allclose(np.mean(vals), -1 / 5, rtol=1e-12)
    z = x - x.mean()
    dense = len(x) / Wd.sum() * np.einsum("i,ij,j->", z, Wd, z) / (z @ z)
    assert_allclose(moran_i(x, W), dense, rtol=1e-12)
    r = moran_test(x, W, n_permutations=0)
    assert r.expected == -1 / 5 and r.p_permutation is None
    # the normality variance (Cliff & Ord 1981, eq. 1.35) from its sums, here by hand
    S0 = Wd.sum()
    S1 = 0.5 * ((Wd + Wd.T) ** 2).sum()
    S2 = ((Wd.sum(1) + Wd.sum(0)) ** 2).sum()
    n = 6
    var = (n * n * S1 - n * S2 + 3 * S0**2) / ((n * n - 1) * S0**2) - (1 / 5) ** 2
    assert_allclose(r.variance, var, rtol=1e-12)


def test_weights_knn_and_inverse_distance():
    lat = np.array([0.0, 0.0, 0.0, 1.0])
    lon = np.array([0.0, 1.0, 3.0, 0.0])
    W, same = weights_matrix(lat, lon, "knn:2")
    d = great_circle_km(lat[:, None], lon[:, None], lat[None], lon[None])
    np.fill_diagonal(d, np.inf)
    expect = np.zeros((4, 4))
    for i in range(4):
        expect[i, np.argsort(d[i], kind="stable")[:2]] = 1.0
    assert_allclose(W.toarray(), expect)
    Wi, _ = weights_matrix(lat, lon, "inverse-distance:200km")
    ref = np.where(d <= 200, 1 / d, 0.0)
    assert_allclose(Wi.toarray(), ref, rtol=1e-12)
    assert same == 0


def test_residual_moran_finds_planted_dependence_and_names_model():
    rng = np.random.default_rng(1)
    k = 80
    lat, lon = rng.uniform(-10, -5, k), rng.uniform(110, 116, k)
    D = great_circle_km(lat[:, None], lon[:, None], lat[None], lon[None])
    s = np.linalg.cholesky(0.1 * np.exp(-D / 200) + 1e-9 * np.eye(k)) @ rng.normal(size=k)
    v = np.full(k, 0.01)
    df = pd.DataFrame({"y": s + rng.normal(0, 0.1, k), "v": v})
    m = MetaRegression().fit(df, effect="y", variance="v")
    r = residual_moran(m, lat, lon, weights="knn:5", n_permutations=199, seed=1)
    assert r.I > r.expected and r.p_permutation <= 0.01 and r.p_normal < 0.01
    assert "REML model (no moderators)" in r.model
    c = correlogram(m.standardized_residuals()["z"].to_numpy(), lat, lon, bands=4,
                    n_permutations=49, seed=1)
    assert len(c.table) == 4 and c.table["I"].iloc[0] > c.table["I"].iloc[-1]


def test_shared_cells_counts_distinct_sites():
    t = pd.DataFrame({"site_lat": [1.0, 1.1, 1.1, 5.0, np.nan],
                      "site_lon": [2.0, 2.0, 2.0, 2.0, 2.0],
                      "x_cell_lat": [1.0, 1.0, 1.0, 5.0, np.nan],
                      "x_cell_lon": [2.0, 2.0, 2.0, 2.0, np.nan]})
    s = shared_cells(t, "x")
    assert (s.cells_shared, s.sites_sharing, s.rows_sharing) == (1, 2, 3)
    assert s.flag.tolist() == [True, True, True, False, False]


def _reml_negll(theta, y, v, X, D):
    t2, s2, rho = theta
    V = np.diag(v + t2) + s2 * np.exp(-D / rho)
    Vi = np.linalg.inv(V)
    F = X.T @ Vi @ X
    b = np.linalg.solve(F, X.T @ Vi @ y)
    r = y - X @ b
    return 0.5 * (np.linalg.slogdet(V)[1] + np.linalg.slogdet(F)[1] + r @ Vi @ r)


def test_spatial_random_effect_reml_against_scipy():
    rng = np.random.default_rng(5)
    k = 60
    lat, lon = rng.uniform(-10, -6, k), rng.uniform(110, 115, k)
    D = great_circle_km(lat[:, None], lon[:, None], lat[None], lon[None])
    s = np.linalg.cholesky(0.08 * np.exp(-D / 120) + 1e-9 * np.eye(k)) @ rng.normal(size=k)
    x = rng.normal(size=k)
    v = rng.uniform(0.005, 0.02, k)
    y = 0.3 * x + s + rng.normal(0, 0.05, k) + rng.normal(0, np.sqrt(v))
    df = pd.DataFrame({"y": y, "v": v, "x": x})
    m = MetaRegression(moderators="x").fit(df, effect="y", variance="v")
    f = fit_spatial(m, lat, lon)
    X = np.column_stack([np.ones(k), x])

    def obj(p):  # positive parameters through squares / exp: an independent route
        return _reml_negll([p[0] ** 2, p[1] ** 2, np.exp(p[2])], y, v, X, D)

    best = min((optimize.minimize(obj, [0.1, 0.2, np.log(r0)], method="Nelder-Mead",
                                  options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000})
                for r0 in (30.0, 100.0, 300.0)), key=lambda res: res.fun)
    ref = [best.x[0] ** 2, best.x[1] ** 2, np.exp(best.x[2])]
    assert_allclose(-f.loglik - 0.5 * (k - 2) * np.log(2 * np.pi), best.fun, rtol=1e-7)
    assert_allclose([f.components["tau2"], f.sigma2_spatial, f.range_km], ref, rtol=2e-3)
    assert f.lr > 0 and f.lr_p < 0.05
    with pytest.raises(ModelError, match="REML or ML"):
        fit_spatial(MetaRegression(method="DL", moderators="x").fit(df, effect="y", variance="v"),
                    lat, lon)
