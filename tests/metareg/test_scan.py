"""The window scan's statistics: each window's fit, the ML comparison, the family-wise p.

References: each window's fit must equal :class:`MetaRegression` fitted to that
window alone (itself checked against statsmodels and published tables in
test_bcg.py / test_multilevel.py); the ML log-likelihoods against a dense NumPy
formula written here (the normal likelihood of y ~ N(Xβ, V), common practice); the
family-wise p against a loop of single refits over the same permutations (Westfall &
Young 1993: the single-step maxT adjusted p, ``(1 + #{max* >= |t_w|}) / (1 + n)``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from envlink.errors import InputError
from envlink.metareg import MetaRegression
from envlink.metareg.scan import scan_windows
from envlink.metareg.shuffles import Shuffler


def _data(seed: int = 0, S: int = 15, W: int = 4, slope: float = 0.0, planted: int = 1,
          nested: bool = True) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 4, S) if nested else np.ones(S, dtype=int)
    study = np.repeat(np.arange(S), sizes)
    k = study.size
    C = rng.normal(size=(k, 1)) * 0.6 + rng.normal(size=(k, W)) * 0.8
    v = rng.uniform(0.01, 0.05, k)
    y = (0.1 + slope * C[:, planted] + rng.normal(0, 0.15, S)[study] * nested
         + rng.normal(0, 0.1, k) + rng.normal(0, np.sqrt(v)))
    df = pd.DataFrame({"y": y, "v": v, "z": rng.normal(size=k), "study": study})
    return df, pd.DataFrame(C, columns=[f"w{j}" for j in range(W)])


def _ml_loglik(y, v, X, tau2):
    V = np.diag(v + tau2)
    Vi = np.linalg.inv(V)
    b = np.linalg.solve(X.T @ Vi @ X, X.T @ Vi @ y)
    r = y - X @ b
    return -0.5 * (len(y) * np.log(2 * np.pi) + np.linalg.slogdet(V)[1] + r @ Vi @ r)


@pytest.mark.parametrize("nested", [False, True])
def test_each_window_equals_its_single_fit(nested):
    df, C = _data(nested=nested)
    C.iloc[[0, 3], 2] = np.nan  # window w2 lacks two rows
    opts = {"nested": "study"} if nested else {}
    r = scan_windows(df, C, effect="y", variance="v", moderators="z", test="knapp-hartung",
                     n_permutations=0, **opts)
    for _j, name in enumerate(C.columns):
        m = MetaRegression(moderators=f"z + {name}", test="knapp-hartung", **opts).fit(
            df.assign(**{name: C[name]})[C[name].notna()], effect="y", variance="v")
        row = r.table.loc[name]
        assert row["k"] == m.k_
        assert_allclose([row["slope"], row["se"], row["statistic"], row["p"], row["Q_M"]],
                        [m.coef_[-1], m.se_[-1], m.coefficients_["statistic"].iloc[-1],
                         m.coefficients_["p"].iloc[-1], m.Q_M_], rtol=2e-6)
    assert r.family_p is None and "not corrected" in r.notes[-1]


def test_ml_comparison_against_dense_likelihood():
    df, C = _data(nested=False)
    r = scan_windows(df, C, effect="y", variance="v", n_permutations=0)
    y, v = df["y"].to_numpy(), df["v"].to_numpy()
    for name in C.columns:
        full = MetaRegression(method="ML", moderators=name).fit(df.assign(**{name: C[name]}),
                                                                effect="y", variance="v")
        null = MetaRegression(method="ML").fit(df, effect="y", variance="v")
        X1 = np.column_stack([np.ones(len(y)), C[name]])
        l1 = _ml_loglik(y, v, X1, full.tau2_)
        l0 = _ml_loglik(y, v, np.ones((len(y), 1)), null.tau2_)
        row = r.table.loc[name]
        assert_allclose(row["loglik_ml"], l1, rtol=1e-8)
        assert_allclose(row["lr"], 2 * (l1 - l0), rtol=1e-6, atol=1e-8)
        assert_allclose(row["lr_p"], stats.chi2.sf(2 * (l1 - l0), 1), rtol=1e-5)
        assert_allclose(row["delta_aic"], 2 - 2 * (l1 - l0), rtol=1e-6)


@pytest.mark.parametrize("nested", [False, True])
def test_family_p_equals_a_loop_of_single_refits(nested):
    df, C = _data(seed=4, S=10, W=3, slope=0.2, nested=nested)
    opts = {"nested": "study"} if nested else {}
    n = 29
    r = scan_windows(df, C, effect="y", variance="v", n_permutations=n, seed=5, **opts)
    sh = Shuffler(len(df), "within" if nested else "rows", groups=df["study"] if nested else None,
                  seed=5)
    obs = np.abs(r.table["statistic"].to_numpy())
    ge_family = np.zeros(3, dtype=int)
    ge_alone = np.zeros(3, dtype=int)
    for perm in sh.draw(n):
        stat = []
        for name in C.columns:
            m = MetaRegression(moderators=name, **opts).fit(
                df.assign(**{name: C[name].to_numpy()[perm]}), effect="y", variance="v")
            stat.append(abs(m.coef_[-1] / m.se_[-1]))
        ge_family += max(stat) >= obs * (1 - 1e-12)
        ge_alone += np.array(stat) >= obs * (1 - 1e-12)
    assert_allclose(r.table["p_family"], (1 + ge_family) / (1 + n), rtol=1e-12)
    assert_allclose(r.table["p_window_permutation"], (1 + ge_alone) / (1 + n), rtol=1e-12)
    assert r.family_p == r.table.loc[r.best, "p_family"] == r.table["p_family"].min()


@pytest.mark.requires_numba
def test_compiled_kernel_equals_numpy(monkeypatch):
    from envlink.metareg.stacked_nested import fit_stacked_nested

    df, C = _data(seed=2, S=20, W=6)
    C.iloc[[1, 5], 3] = np.nan
    y, v = df["y"].to_numpy(), df["v"].to_numpy()
    X = np.stack([np.column_stack([np.ones(len(y)), C[c]]) for c in C.columns])
    a = fit_stacked_nested(y, v, X, df["study"].to_numpy(), compiled=True)
    b = fit_stacked_nested(y, v, X, df["study"].to_numpy(), compiled=False)
    assert_allclose(a.sigma2, b.sigma2, rtol=1e-7, atol=1e-12)
    assert_allclose(a.coef, b.coef, rtol=1e-8)
    assert_allclose(a.vcov, b.vcov, rtol=1e-7)
    assert (a.k == b.k).all() and a.converged.all()


def test_planted_window_found_and_labelled():
    df, C = _data(seed=7, S=40, W=6, slope=0.25, planted=4, nested=True)
    r = scan_windows(df, C, effect="y", variance="v", nested="study", n_permutations=99, seed=1)
    assert r.best == "w4" and r.family_p <= 0.05
    d = r.to_dict()
    assert d["family_p_label"] == "family-wise p over 6 windows"
    assert "Only the family-wise p" in d["caution"] and len(d["windows"]) == 6
    assert any("family-wise p over 6 windows" in line for line in r.lines())


def test_null_family_p_is_not_small_quick():
    # a quick version of the slow uniformity check in test_scan_sim.py: under no
    # effect the family-wise p of 40 replicates is uniform (Kolmogorov-Smirnov)
    ps = []
    for seed in range(40):
        df, C = _data(seed=100 + seed, S=12, W=4, nested=False)
        ps.append(scan_windows(df, C, effect="y", variance="v", n_permutations=39,
                               seed=seed).family_p)
    assert stats.kstest(ps, "uniform").pvalue > 0.001


def test_unusable_windows_leave_the_family_and_errors():
    df, C = _data(nested=False)
    C["const"] = 1.0
    C["empty"] = np.nan
    r = scan_windows(df, C, effect="y", variance="v", n_permutations=9, seed=1)
    assert r.n_windows == 4 and np.isnan(r.table.loc["const", "p_family"])
    assert "could not be fitted" in r.notes[0]
    with pytest.raises(InputError, match="one row per row of the table"):
        scan_windows(df, C.iloc[:5], effect="y", variance="v")
    with pytest.raises(InputError, match="'REML', 'ML' or 'DL'"):
        scan_windows(df, C, effect="y", variance="v", method="PM")
    with pytest.raises(InputError, match="no cluster-robust"):
        scan_windows(df, C, effect="y", variance="v", cluster="study")
    with pytest.raises(InputError, match="lag' and 'span'"):
        r.heatmap()
