"""Group-wise effect sizes from raw records, against scipy and pandas per-group references."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

import envlink
from envlink import effects as ef
from envlink.errors import InputError


def _records(seed: int = 3, groups: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 30, groups)
    g = np.repeat([f"g{i:03d}" for i in range(groups)], sizes)
    x = rng.normal(size=g.size) * 10 + 1e6  # a large offset: the two-pass sums must stay exact
    y = 0.4 * (x - 1e6) + rng.normal(size=g.size) * 5
    perm = rng.permutation(g.size)  # records of a group are not contiguous
    return pd.DataFrame({"site": g[perm], "x": x[perm], "y": y[perm], "sick": rng.integers(0, 2, g.size)[perm]})


def test_fisher_z_per_group_matches_scipy_pearsonr() -> None:
    rec = _records()
    out = envlink.group_effects(rec, "site", "fisher_z", x="x", y="y")
    assert list(out.columns) == ["site", "n", "n_excluded", "r", "effect", "variance", "effect_flags"]
    assert out["site"].tolist() == list(pd.unique(rec["site"]))  # order of first appearance
    for row in out.itertuples():
        part = rec[rec["site"] == row.site]
        assert row.n == len(part)
        if len(part) <= 3:
            assert np.isnan(row.effect) and "sample_size_at_most_3" in row.effect_flags
            continue
        r = stats.pearsonr(part["x"], part["y"]).statistic  # scipy reference
        assert_allclose(row.r, r, rtol=1e-9)
        assert_allclose(row.effect, math.atanh(r), rtol=1e-9)
        assert_allclose(row.variance, 1 / (len(part) - 3), rtol=1e-15)
        assert row.effect_flags == ""


@pytest.mark.parametrize("kind", ["logit_proportion", "arcsine_proportion", "freeman_tukey"])
def test_proportion_per_group_matches_pandas_groupby(kind: str) -> None:
    rec = _records(seed=8)
    out = envlink.group_effects(rec, "site", kind, outcome="sick")
    ref = rec.groupby("site", sort=False)["sick"].agg(["sum", "count"])  # pandas reference
    assert out["site"].tolist() == ref.index.tolist()
    assert out["events"].tolist() == ref["sum"].tolist() and out["n"].tolist() == ref["count"].tolist()
    direct = getattr(ef, kind)(ref["sum"].to_numpy(), ref["count"].to_numpy())
    assert_allclose(out["effect"], direct.effect, rtol=1e-15)
    assert_allclose(out["variance"], direct.variance, rtol=1e-15)
    assert out["effect_flags"].tolist() == direct.flags.tolist()


def test_excluded_records_and_flags() -> None:
    rec = pd.DataFrame(
        {
            "g": ["a", "a", "a", "a", "a", "b", "b", "b", "b", None, "c", "c", "c", "c"],
            "x": [1, 2, 3, 4, np.nan, 1, 2, 3, 4, 1, 5, 5, 5, 5],
            "y": [2, 1, 4, 3, 9, 1, 2, 3, 4.5, 2, 1, 2, 3, 4],
            "ill": [1, 0, 1, 2, 0, True, 0, 0, 1, 1, 0, "", 0, 1],
        }
    )
    z = envlink.group_effects(rec, "g", "fisher_z", x="x", y="y")
    assert z["g"].iloc[[0, 1, 3]].tolist() == ["a", "b", "c"] and pd.isna(z["g"].iloc[2])
    assert z["n"].tolist() == [4, 4, 1, 4] and z["n_excluded"].tolist() == [1, 0, 0, 0]
    assert z["effect_flags"].tolist() == [
        "records_excluded",
        "",
        "sample_size_at_most_3;missing_group",
        "zero_variance_in_group",
    ]
    assert_allclose(z["r"].iloc[0], stats.pearsonr([1, 2, 3, 4], [2, 1, 4, 3]).statistic, rtol=1e-12)
    assert np.isnan(z["effect"].iloc[3]) and np.isnan(z["r"].iloc[3])
    p = envlink.group_effects(rec, "g", "logit_proportion", outcome="ill")
    assert p["n"].tolist() == [4, 4, 1, 3] and p["events"].tolist() == [2, 2, 1, 1]
    assert p["effect_flags"].tolist() == [
        "records_excluded;outcome_not_binary",
        "",
        "continuity_corrected;missing_group",
        "records_excluded",
    ]


def test_group_effects_errors() -> None:
    rec = pd.DataFrame({"site": ["a"], "x": [1.0], "y": [2.0], "n": [1]})
    with pytest.raises(InputError, match="'kind' parameter of group_effects"):
        envlink.group_effects(rec, "site", "hedges_g", x="x", y="y")  # type: ignore[arg-type]
    with pytest.raises(InputError, match="needs x= and y="):
        envlink.group_effects(rec, "site", "fisher_z", x="x")
    with pytest.raises(InputError, match="needs outcome="):
        envlink.group_effects(rec, "site", "logit_proportion", x="x")
    with pytest.raises(InputError, match="records table has no column 'sit'"):
        envlink.group_effects(rec, "sit", "fisher_z", x="x", y="y")
    with pytest.raises(InputError, match="would clash"):
        envlink.group_effects(rec.rename(columns={"site": "n", "n": "k"}), "n", "fisher_z", x="x", y="y")


def test_many_groups_are_vectorised() -> None:
    # 2 * 10^5 groups must take well under a second: no Python loop over groups
    import time

    rng = np.random.default_rng(0)
    g = np.repeat(np.arange(200_000), 5)
    rec = pd.DataFrame({"g": g, "x": rng.normal(size=g.size), "y": rng.normal(size=g.size)})
    start = time.perf_counter()
    out = envlink.group_effects(rec, "g", "fisher_z", x="x", y="y")
    assert time.perf_counter() - start < 5.0
    assert len(out) == 200_000 and (out["n"] == 5).all()
    assert_allclose(out["variance"], 0.5, rtol=1e-15)


def test_empty_records_and_categorical_groups() -> None:
    empty = pd.DataFrame({"g": pd.Series([], dtype=object), "o": pd.Series([], dtype=float)})
    out = envlink.group_effects(empty, "g", "logit_proportion", outcome="o")
    assert len(out) == 0 and list(out.columns)[-1] == "effect_flags"
    cat = pd.DataFrame({"g": pd.Categorical(["b", "a", "b"], categories=["a", "b", "z"]), "o": [1, 0, 0]})
    out = envlink.group_effects(cat, "g", "logit_proportion", outcome="o")
    # only observed groups, in order of first appearance (common practice: no empty groups)
    assert out["g"].astype(str).tolist() == ["b", "a"] and out["events"].tolist() == [1, 0]
    assert_allclose(out["effect"], [0.0, math.log(0.5 / 1.5)], rtol=1e-12, atol=1e-15)
