"""Permutation tests: the stacked fits against one refit per permutation, schemes, labels.

References: the stacked fits are checked against :class:`MetaRegression` fitted to
each design alone (itself checked against statsmodels, the BCG trials of Colditz et
al. 1994 and an independent dense likelihood in test_bcg.py / test_multilevel.py);
the fast permutation p must equal the straightforward loop of single refits for the
same seed (the same permutations, counted the same way: Higgins & Thompson 2004,
p = (1 + #{T* >= T}) / (1 + n), common practice).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from envlink.errors import InputError, ModelError
from envlink.metareg import MetaRegression
from envlink.metareg.permutation import model_families, permutation_test_model
from envlink.metareg.shuffles import PERMUTATION_SCHEMES, Shuffler, draw_permutations
from envlink.metareg.stacked import fit_stacked, stacked_tests
from envlink.metareg.stacked_nested import fit_stacked_nested


def _table(seed: int = 3, S: int = 14, slope: float = 0.08) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 5, S)
    study = np.repeat(np.arange(S), sizes)
    k = study.size
    x = rng.normal(size=k)
    v = rng.uniform(0.01, 0.08, k)
    y = (0.2 + slope * x + rng.normal(0, 0.25, S)[study] + rng.normal(0, 0.12, k)
         + rng.normal(0, np.sqrt(v)))
    return pd.DataFrame({"y": y, "v": v, "x": x, "z": rng.normal(size=k),
                         "g": rng.choice(["a", "b", "c"], k), "study": [f"s{j}" for j in study]})


@pytest.mark.parametrize("method", ["REML", "ML", "DL"])
def test_stacked_fits_equal_single_fits(method):
    df = _table(S=40)
    rng = np.random.default_rng(0)
    k = len(df)
    X = np.stack([np.column_stack([np.ones(k), df["x"].to_numpy()[rng.permutation(k)]])
                  for _ in range(5)])
    y, v = df["y"].to_numpy(), df["v"].to_numpy()
    f = fit_stacked(y, v, X, method=method, tol=1e-12)
    t = stacked_tests(f, [1], test="knapp-hartung")
    for i in range(5):
        m = MetaRegression(method=method, test="knapp-hartung", tol=1e-12).fit(y=y, v=v, X=X[i, :, 1:])
        assert_allclose(f.tau2[i], m.tau2_, rtol=1e-8, atol=1e-12)
        assert_allclose(f.coef[i], m.coef_, rtol=1e-8)
        assert_allclose(t.se[i], m.se_, rtol=1e-8)
        assert_allclose(t.Q_M[i], m.Q_M_, rtol=1e-8)


@pytest.mark.parametrize("method", ["REML", "ML"])
def test_stacked_nested_fits_equal_single_fits(method):
    df = _table(S=30)
    codes = pd.factorize(df["study"])[0]
    rng = np.random.default_rng(1)
    k = len(df)
    X = np.stack([np.column_stack([np.ones(k), df["x"].to_numpy()[rng.permutation(k)]])
                  for _ in range(4)])
    y, v = df["y"].to_numpy(), df["v"].to_numpy()
    f = fit_stacked_nested(y, v, X, codes, method=method)
    for i in range(4):
        m = MetaRegression(method=method, moderators="x", nested="study").fit(
            df.assign(x=X[i, :, 1]), effect="y", variance="v")
        assert_allclose(f.sigma2[i], list(m.variance_components_.values()), rtol=1e-5, atol=1e-9)
        assert_allclose(f.coef[i], m.coef_, rtol=1e-7)
        assert_allclose(np.sqrt(np.diagonal(f.vcov[i])), m.se_, rtol=1e-6)


def test_stacked_rows_with_missing_moderators_are_left_out():
    df = _table(S=30)
    x = df["x"].to_numpy().copy()
    x[[2, 7, 11]] = np.nan
    k = len(df)
    X = np.column_stack([np.ones(k), x])[None]
    f = fit_stacked(df["y"].to_numpy(), df["v"].to_numpy(), X)
    keep = np.isfinite(x)
    m = MetaRegression().fit(y=df["y"].to_numpy()[keep], v=df["v"].to_numpy()[keep], X=x[keep])
    assert f.k[0] == keep.sum()
    assert_allclose(f.coef[0], m.coef_, rtol=1e-8)


CASES = [
    dict(moderators="x"),
    dict(moderators="x + z + C(g)", test="knapp-hartung"),
    dict(moderators="x + z", method="DL"),
    dict(moderators="x", tau2=0.02),
    dict(moderators="x + C(g)", nested="study"),
    dict(moderators="x", nested="study", method="ML", test="knapp-hartung"),
]


@pytest.mark.parametrize("options", CASES)
def test_fast_permutation_p_equals_the_refit_loop(options):
    df = _table()
    m = MetaRegression(**options).fit(df, effect="y", variance="v")
    fast = permutation_test_model(m, 99, 11, progress=False)
    loop = permutation_test_model(m, 99, 11, engine="refit", progress=False)
    assert fast.engine == "stacked" and loop.engine == "refit"
    assert fast.terms["p"].tolist() == loop.terms["p"].tolist()
    assert fast.Q_M_p == loop.Q_M_p
    assert_allclose(fast.terms["statistic"], loop.terms["statistic"], rtol=1e-6)


@pytest.mark.parametrize("scheme", ["within", "blocks"])
def test_fast_equals_loop_under_group_schemes(scheme):
    df = _table(S=12)
    m = MetaRegression(moderators="x", nested="study").fit(df, effect="y", variance="v")
    fast = permutation_test_model(m, 60, 2, scheme=scheme, progress=False)
    loop = permutation_test_model(m, 60, 2, scheme=scheme, engine="refit", progress=False)
    assert fast.scheme == scheme
    assert fast.terms["p"].tolist() == loop.terms["p"].tolist()


def test_cluster_robust_models_use_the_refit_loop():
    df = _table()
    m = MetaRegression(moderators="x", cluster="study").fit(df, effect="y", variance="v")
    r = m.permutation_test(19, seed=1, progress=False)
    assert r.engine == "refit"
    with pytest.raises(ModelError, match="engine='refit'"):
        permutation_test_model(m, 9, 1, engine="stacked", progress=False)


def test_terms_and_omnibus_are_labelled_apart():
    df = _table()
    m = MetaRegression(moderators="x + C(g)").fit(df, effect="y", variance="v")
    r = m.permutation_test(49, seed=4, progress=False)
    d = r.to_dict()
    assert [t["term"] for t in d["terms"]] == ["x", "C(g)"]
    assert d["terms"][0]["label"] == "permutation p for x (this model)"
    assert d["terms"][1]["columns"] == ["C(g)[T.b]", "C(g)[T.c]"]
    assert d["omnibus"]["label"].startswith("omnibus permutation p of Q_M")
    text = "\n".join(r.lines())
    assert "permutation p for x (this model" in text and "omnibus permutation p of Q_M" in text
    assert "correct for nothing beyond this one model" in text
    # with one term, the term's p is the omnibus p (|z| and Q_M = z² order alike)
    one = MetaRegression(moderators="x").fit(df, effect="y", variance="v").permutation_test(
        49, seed=4, progress=False)
    assert one.Q_M_p == one.terms["p"].iloc[0]


def test_families_follow_formula_terms():
    df = _table()
    m = MetaRegression(moderators="x + C(g) + x:z").fit(df, effect="y", variance="v")
    fams = model_families(m.terms_, m.design_.spec)
    assert [f.name for f in fams] == ["Q_M", "x", "C(g)", "x:z"]
    assert fams[2].columns == (2, 3) and fams[0].columns == (1, 2, 3, 4)


def test_shuffler_schemes():
    groups = np.array(["b", "a", "b", "c", "a", "c", "c", "d", "d", "e"])
    within = Shuffler(10, "within", groups=groups, seed=3).draw(500)
    assert all((groups[p] == groups).all() for p in within)
    # b, a, c, d have 2, 2, 3, 2 rows: 2 * 2 * 6 * 2 = 48 arrangements (counting)
    assert len({tuple(p) for p in within.tolist()}) == 48
    blocks = Shuffler(10, "blocks", groups=groups, seed=3).draw(500)
    sizes = pd.Series(groups).value_counts()
    for p in blocks:  # every group receives the rows of one group of its own size
        for g in sizes.index:
            src = set(groups[p[groups == g]])
            assert len(src) == 1 and sizes[src.pop()] == sizes[g]
    # draws of a seed do not depend on the batch sizes
    a = draw_permutations(10, 7, "rows", seed=9)
    s = Shuffler(10, "rows", seed=9)
    assert (np.vstack([s.draw(3), s.draw(4)]) == a).all()


def test_scheme_errors():
    df = _table()
    m = MetaRegression(moderators="x").fit(df, effect="y", variance="v")
    with pytest.raises(ModelError, match="nested=COLUMN"):
        m.permutation_test(9, seed=1, scheme="within", progress=False)
    with pytest.raises(InputError, match="Did you mean 'blocks'"):
        m.permutation_test(9, seed=1, scheme="blocs", progress=False)
    one = pd.DataFrame({"y": [0.1, 0.4, 0.2, 0.5, 0.3, 0.6], "v": [0.01] * 6,
                        "x": [1.0, 2, 3, 4, 5, 6], "s": ["a", "b", "b", "c", "c", "c"]})
    mm = MetaRegression(moderators="x", nested="s", method="REML").fit(one, effect="y", variance="v")
    with pytest.raises(ModelError, match="cannot move any row"):
        mm.permutation_test(9, seed=1, scheme="blocks", progress=False)
    assert PERMUTATION_SCHEMES.parse("within_studies").label() == "within"
