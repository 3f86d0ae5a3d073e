"""Meta-regression on a dask.distributed cluster equals the single-machine fit.

A ``LocalCluster`` with two worker processes (one thread each) is started once for the
module. Reference: envlink's own single-machine fit of the same rows (the formula path
on a pandas table, or the array path), itself checked against published values in
test_bcg.py; the cluster must agree to 1e-10 (the only difference is the order in
which the per-partition sums are added).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from envlink.cli import main
from envlink.errors import ModelError
from envlink.metareg import MetaRegression
from envlink.metareg.chunked import design_from_source, fit_on_cluster

pytestmark = [pytest.mark.requires_dask, pytest.mark.requires_pyarrow]

RTOL = 1e-10


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                  dashboard_address=":0") as cluster, \
            distributed.Client(cluster) as c:
        yield c


def _parts(seed: int = 3, sizes=(1500, 2200, 1800)) -> list[pd.DataFrame]:
    rng = np.random.default_rng(seed)
    out = []
    for n in sizes:
        x = rng.normal(size=(n, 2))
        v = rng.uniform(0.01, 0.1, n)
        y = 0.2 + x @ [0.1, -0.05] + rng.normal(0, 0.1, n) + rng.normal(0, np.sqrt(v))
        out.append(pd.DataFrame({"y": y, "v": v, "x1": x[:, 0], "x2": x[:, 1]}))
    out[1].loc[7, "x2"] = np.nan  # one row left out: row 1508 of the whole dataset
    return out


def _values(d: dict) -> dict[str, float]:
    h = d["heterogeneity"]  # fit.json format 2.0 sections
    out = {"tau2": h["tau2"], "I2": h["I2_percent"], "H2": h["H2"], "R2": h["R2_percent"],
           "Q_E": h["residual_test"]["Q_E"], "Q_M": d["moderator_test"]["Q_M"],
           "ci_lo": h["tau2_interval"]["low"], "ci_hi": h["tau2_interval"]["high"]}
    for c in d["coefficients"]["table"]:
        for key in ("estimate", "se", "statistic", "ci_low", "ci_high"):
            out[f"{c['term']}.{key}"] = c[key]
    return out


def _same(got: dict, want: dict) -> None:
    g, w = _values(got), _values(want)
    assert g.keys() == w.keys()
    for key in g:
        assert_allclose(g[key], w[key], rtol=RTOL, err_msg=key)
    assert got["model"]["effects_used"] == want["model"]["effects_used"]
    assert got["warnings"] == want["warnings"]


def test_parquet_dataset_on_cluster_equals_one_machine(tmp_path, client):
    parts = _parts()
    for i, df in enumerate(parts):
        df.to_parquet(tmp_path / f"part{i}.parquet", row_group_size=700)
    with pytest.warns(Warning, match="row 1508"):
        m = fit_on_cluster(tmp_path, effect="y", variance="v", moderators="x1 + x2", client=client)
        got = m.to_dict()
    with pytest.warns(Warning, match="row 1508"):
        ref = MetaRegression(moderators="x1 + x2").fit(pd.concat(parts, ignore_index=True),
                                                       effect="y", variance="v")
    _same(got, ref.to_dict())
    assert m.n_dropped_ == 1 and not m.included_[1507]


def test_zarr_float32_on_cluster_equals_one_machine(tmp_path, client):
    zarr = pytest.importorskip("zarr")
    df = pd.concat(_parts(seed=4), ignore_index=True).dropna()
    store = tmp_path / "effects.zarr"
    group = zarr.open_group(str(store), mode="w")
    for c in ("y", "v", "x1", "x2"):
        group.create_array(c, data=df[c].to_numpy(np.float32), chunks=(1000,))
    got = fit_on_cluster(store, effect="y", variance="v", moderators="x1 + x2", client=client,
                         method="ML", test="knapp-hartung").to_dict()
    ref = MetaRegression(method="ML", test="knapp-hartung").fit(
        y=df["y"].to_numpy(np.float32), v=df["v"].to_numpy(np.float32),
        X=df[["x1", "x2"]].to_numpy(np.float32))
    want = ref.to_dict()
    for c, name in zip(want["coefficients"]["table"], ["intercept", "x1", "x2"], strict=True):
        c["term"] = name  # the array path names its columns x1, x2 too
    assert got["model"]["effects_used"] == want["model"]["effects_used"] == len(df)
    _same(got, want)


def test_cli_scheduler_equals_single_machine(tmp_path, client, capsys):
    parts = _parts(seed=5)
    folder = tmp_path / "dataset"
    folder.mkdir()
    for i, df in enumerate(parts):
        df.to_parquet(folder / f"p{i}.parquet")
    whole = tmp_path / "whole.parquet"
    pd.concat(parts, ignore_index=True).to_parquet(whole)
    args = ["--effect", "y", "--variance", "v", "--moderators", "x1 + x2", "--test", "knapp-hartung"]
    assert main(["fit", str(folder), *args, "--scheduler", client.scheduler.address,
                 "--json", str(tmp_path / "c.json")]) == 0
    assert main(["fit", str(whole), *args, "--json", str(tmp_path / "s.json")]) == 0
    capsys.readouterr()
    _same(json.loads((tmp_path / "c.json").read_text()),
          json.loads((tmp_path / "s.json").read_text()))


def test_cluster_names_the_row_of_a_bad_variance(tmp_path, client):
    parts = _parts(seed=6)
    parts[2].loc[10, "v"] = 0.0  # row 1500 + 2200 + 11 of the whole dataset
    for i, df in enumerate(parts):
        df.to_parquet(tmp_path / f"part{i}.parquet")
    with pytest.raises(ModelError, match=r"'v' must be positive and finite; row 3711 has 0\.0"):
        with __import__("dask").config.set(scheduler=client):
            design_from_source(tmp_path, effect="y", variance="v", moderators="x1 + x2")


def test_cluster_refuses_formulas_and_options(tmp_path, client, capsys):
    _parts()[0].to_parquet(tmp_path / "a.parquet")
    assert main(["fit", str(tmp_path), "--effect", "y", "--variance", "v", "--moderators",
                 "C(x1)", "--scheduler", client.scheduler.address]) == 2
    assert "plain sum of numeric columns" in capsys.readouterr().err
    assert main(["fit", str(tmp_path), "--effect", "y", "--variance", "v", "--nested", "x1",
                 "--scheduler", client.scheduler.address]) == 2
    assert "--nested is not available with --scheduler" in capsys.readouterr().err
