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
        envlink.group_effects(rec, "site", "log_odds_ratio", x="x", y="y")  # type: ignore[arg-type]
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


# ------------------------------------------------------------- two arms per group
def _two_arm_records(seed: int = 11, groups: int = 80) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(2, 40, groups)
    g = np.repeat([f"s{i:03d}" for i in range(groups)], sizes)
    arm = rng.choice(["treated", "control", "pilot"], g.size, p=[0.45, 0.45, 0.1])
    mass = rng.gamma(6.0, 2.0, g.size) + np.where(arm == "treated", 1.5, 0.0)
    perm = rng.permutation(g.size)
    rec = pd.DataFrame({"site": g[perm], "arm": arm[perm], "mass": mass[perm]})
    rec.loc[5, "mass"] = np.nan
    return rec


def _arm_stats(part: pd.DataFrame, label: str) -> tuple[float, float, int]:
    vals = part.loc[part["arm"] == label, "mass"].dropna().to_numpy()
    return vals.mean(), vals.std(ddof=1), vals.size


def test_hedges_g_per_group_matches_statsmodels_and_borenstein() -> None:
    from statsmodels.stats.meta_analysis import effectsize_smd

    rec = _two_arm_records()
    out = envlink.group_effects(rec, "site", "hedges_g", value="mass", arm="arm",
                                arms=("treated", "control"), exact=False)
    assert list(out.columns) == ["site", "n", "n_excluded", "n1", "mean1", "sd1", "n2", "mean2",
                                 "sd2", "effect", "variance", "effect_flags"]
    ok = out[(out["n1"] >= 2) & (out["n2"] >= 2)]
    assert len(ok) > 60
    for row in ok.itertuples():
        part = rec[rec["site"] == row.site]
        m1, s1, n1 = _arm_stats(part, "treated")
        m2, s2, n2 = _arm_stats(part, "control")
        assert (row.n1, row.n2) == (n1, n2)
        assert_allclose([row.mean1, row.sd1, row.mean2, row.sd2], [m1, s1, m2, s2], rtol=1e-12)
        g_sm, _ = effectsize_smd(m1, s1, n1, m2, s2, n2)  # statsmodels: J = 1 - 3 / (4 N - 9)
        assert_allclose(row.effect, g_sm, rtol=1e-12)
        # Borenstein et al. (2009, ch. 4): V_g = J² ((n1 + n2) / (n1 n2) + d² / (2 (n1 + n2)))
        j = 1 - 3 / (4 * (n1 + n2 - 2) - 1)
        d = row.effect / j
        assert_allclose(row.variance, j**2 * ((n1 + n2) / (n1 * n2) + d**2 / (2 * (n1 + n2))),
                        rtol=1e-12)
        assert row.n_excluded == int((part["arm"] == "pilot").sum() + part["mass"].isna().sum())


def test_ln_vr_and_ln_cvr_per_group_match_nakagawa_formulas() -> None:
    rec = _two_arm_records(seed=12)
    vr = envlink.group_effects(rec, "site", "ln_vr", value="mass", arm="arm",
                               arms=("treated", "control"))
    cvr = envlink.group_effects(rec, "site", "ln_cvr", value="mass", arm="arm",
                                arms=("treated", "control"))
    for a, b in zip(vr.itertuples(), cvr.itertuples(), strict=True):
        if min(a.n1, a.n2) < 2:
            assert np.isnan(a.effect) and "sample_size_below_2" in a.effect_flags
            continue
        part = rec[rec["site"] == a.site]
        m1, s1, n1 = _arm_stats(part, "treated")
        m2, s2, n2 = _arm_stats(part, "control")
        # Nakagawa et al. (2015), Methods Ecol. Evol. 6:143, eqs. for lnVR and lnCVR
        c = 1 / (2 * (n1 - 1)) - 1 / (2 * (n2 - 1))
        v = 1 / (2 * (n1 - 1)) + 1 / (2 * (n2 - 1))
        assert_allclose(a.effect, math.log(s1 / s2) + c, rtol=1e-12)
        assert_allclose(a.variance, v, rtol=1e-12)
        assert_allclose(b.effect, math.log((s1 / m1) / (s2 / m2)) + c, rtol=1e-12)
        assert_allclose(b.variance, s1**2 / (n1 * m1**2) + s2**2 / (n2 * m2**2) + v, rtol=1e-12)


def test_two_arm_kinds_need_a_value_an_arm_and_two_labels() -> None:
    rec = _two_arm_records()
    with pytest.raises(InputError, match="needs value= and arm="):
        envlink.group_effects(rec, "site", "hedges_g", value="mass")
    with pytest.raises(InputError, match="'arms' parameter of group_effects must be two different"):
        envlink.group_effects(rec, "site", "hedges_g", value="mass", arm="arm", arms=("x", "x"))
    with pytest.raises(InputError, match="takes no arms="):
        envlink.group_effects(rec, "site", "fisher_z", x="mass", y="mass", arms=("a", "b"))


# ------------------------------------------------------------- records in Parquet
KINDS = [("fisher_z", {"x": "x", "y": "y"}), ("logit_proportion", {"outcome": "sick"}),
         ("freeman_tukey", {"outcome": "sick"}),
         ("hedges_g", {"value": "mass", "arm": "arm", "arms": ("t", "c")}),
         ("ln_cvr", {"value": "mass", "arm": "arm", "arms": ("t", "c")})]


def _mixed_records(seed: int = 21, groups: int = 300) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 30, groups)
    g = np.repeat(np.arange(groups, dtype=np.int64), sizes)
    perm = rng.permutation(g.size)
    x = rng.normal(size=g.size) * 10 + 1e6  # a large offset: the sums must stay exact
    rec = pd.DataFrame({"site": g[perm], "x": x, "y": 0.4 * (x - 1e6) + rng.normal(size=g.size),
                        "sick": rng.integers(0, 2, g.size).astype(float),
                        "arm": rng.choice(["t", "c", "o"], g.size, p=[0.45, 0.45, 0.1]),
                        "mass": rng.gamma(5.0, 2.0, g.size)})
    rec.loc[3, "x"] = np.nan
    rec.loc[4, "sick"] = 3.0  # not 0/1: excluded and flagged
    rec.loc[9, "mass"] = np.inf
    return rec


def _write_two_files(rec: pd.DataFrame, folder) -> None:
    half = len(rec) // 2
    rec.iloc[:half].to_parquet(folder / "a.parquet", row_group_size=700)
    rec.iloc[half:].to_parquet(folder / "b.parquet", row_group_size=700)


def _assert_same_table(got: pd.DataFrame, want: pd.DataFrame) -> None:
    assert list(got.columns) == list(want.columns)
    assert got.iloc[:, 0].tolist() == want.iloc[:, 0].tolist()  # order of first appearance
    for c in want.columns[1:]:
        if want[c].dtype.kind in "fiub":
            assert_allclose(got[c].to_numpy(float), want[c].to_numpy(float), rtol=1e-9, atol=1e-13,
                            err_msg=c)
        else:
            assert got[c].tolist() == want[c].tolist(), c


@pytest.mark.requires_duckdb
@pytest.mark.requires_pyarrow
@pytest.mark.parametrize(("kind", "cols"), KINDS)
def test_parquet_records_by_duckdb_equal_records_in_memory(tmp_path, kind, cols) -> None:
    from envlink.effects.streaming import summary_duckdb  # noqa: F401 - the engine under test

    rec = _mixed_records()
    _write_two_files(rec, tmp_path)
    want = envlink.group_effects(rec, "site", kind, **cols)
    _assert_same_table(envlink.group_effects(tmp_path, "site", kind, **cols), want)


@pytest.mark.requires_dask
@pytest.mark.requires_pyarrow
@pytest.mark.parametrize(("kind", "cols"), KINDS[:2] + KINDS[3:4])
def test_parquet_records_by_dask_equal_records_in_memory(tmp_path, monkeypatch, kind, cols) -> None:
    from envlink.effects import streaming

    rec = _mixed_records(seed=22)
    _write_two_files(rec, tmp_path)
    monkeypatch.setattr(streaming, "summary_duckdb", streaming.summary_dask)  # the engine without DuckDB
    want = envlink.group_effects(rec, "site", kind, **cols)
    _assert_same_table(envlink.group_effects(tmp_path, "site", kind, **cols), want)


@pytest.mark.requires_duckdb
def test_group_correlations_match_numpy_corrcoef_and_duckdb_corr(tmp_path) -> None:
    import duckdb

    rng = np.random.default_rng(5)
    g = rng.integers(0, 500, 20_000)
    x = rng.normal(size=g.size) + 50.0
    rec = pd.DataFrame({"g": g, "x": x, "y": 0.2 * x + rng.normal(size=g.size)})
    out = envlink.group_effects(rec, "g", "fisher_z", x="x", y="y").set_index("g")
    for key in rng.choice(out.index.to_numpy(), 40, replace=False):  # numpy.corrcoef reference
        part = rec[rec["g"] == key]
        assert_allclose(out.loc[key, "r"], np.corrcoef(part["x"], part["y"])[0, 1], rtol=1e-12)
    ref = duckdb.sql("SELECT g, corr(x, y) AS r FROM rec GROUP BY g").df().set_index("g")
    assert_allclose(out["r"].to_numpy(), ref.loc[out.index, "r"].to_numpy(), rtol=1e-11)
    rec.to_parquet(tmp_path / "r.parquet")
    streamed = envlink.group_effects(tmp_path / "r.parquet", "g", "fisher_z", x="x", y="y")
    assert_allclose(streamed["r"].to_numpy(), out["r"].to_numpy(), rtol=1e-11)


@pytest.mark.requires_dask
@pytest.mark.requires_pyarrow
def test_parquet_records_on_a_local_cluster_equal_records_in_memory(tmp_path) -> None:
    distributed = pytest.importorskip("distributed")
    rec = _mixed_records(seed=23)
    _write_two_files(rec, tmp_path)
    want = envlink.group_effects(rec, "site", "fisher_z", x="x", y="y")
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                  dashboard_address=":0") as cluster:
        got = envlink.group_effects(tmp_path, "site", "fisher_z", x="x", y="y",
                                    client=cluster.scheduler_address)
    _assert_same_table(got, want)


@pytest.mark.quick_benchmark
@pytest.mark.requires_duckdb
def test_quick_benchmark_group_effects_from_parquet() -> None:
    from benchmarks.bench_group_effects import main

    res = main(["--quick"])
    z = res["kinds"]["fisher_z"]
    assert z["spot_check_max_abs_r_diff"] < 1e-12  # numpy.corrcoef of the records
    assert z["envlink_peak_mib"] < 1024


@pytest.mark.requires_duckdb
@pytest.mark.requires_dask
@pytest.mark.requires_pyarrow
@pytest.mark.parametrize("engine", ["duckdb", "dask"])
def test_blank_group_cells_join_the_missing_group_in_memory_and_streamed(tmp_path, monkeypatch, engine) -> None:
    # Checks against docs/methods.md: records with a missing group value form one group
    # flagged missing_group; a blank text cell counts as missing, alike in memory and streamed.
    from envlink.effects import streaming

    rec = pd.DataFrame({"reef": ["a", "", None, "b", "  ", "a", "b", ""],
                        "ill": [1.0, 0.0, 1.0, 1.0, 1.0, 0.0, 0.0, 1.0]})
    rec.iloc[:4].to_parquet(tmp_path / "a.parquet")
    rec.iloc[4:].to_parquet(tmp_path / "b.parquet")
    if engine == "dask":
        monkeypatch.setattr(streaming, "summary_duckdb", streaming.summary_dask)
    want = envlink.group_effects(rec, "reef", "logit_proportion", outcome="ill")
    assert want["reef"].isna().tolist() == [False, True, False] and want["n"].tolist() == [2, 4, 2]
    assert want["effect_flags"].str.contains("missing_group").tolist() == [False, True, False]
    got = envlink.group_effects(tmp_path, "reef", "logit_proportion", outcome="ill")
    assert got["reef"].isna().tolist() == want["reef"].isna().tolist()
    _assert_same_table(got.fillna({"reef": "-"}), want.fillna({"reef": "-"}))
