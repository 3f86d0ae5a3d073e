"""Quick variant of tests/benchmarks/bench_attach.py: a tiny grid, checked for values and speed."""

from __future__ import annotations

import importlib.util
import time
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from envlink.extract import reader
from envlink.extract.attach import attach
from envlink.grids.open import open_grid

_BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_attach.py"


@pytest.fixture(scope="module")
def bench():
    spec = importlib.util.spec_from_file_location("bench_attach", _BENCH)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.quick_benchmark
def test_quick_benchmark_values_and_speed(bench, tmp_path, monkeypatch):
    ny, nx, nt, n = 72, 144, 48, 1500
    paths = bench.write_grids(tmp_path, ny, nx, nt)
    table = bench.make_rows(n, ny, nx, nt)
    rows = table.drop(columns=["_m0", "_m1"])
    import netCDF4

    with netCDF4.Dataset(paths["compressed"]) as ds:
        iy, ix = bench._cells(ds, table)
        raw = np.asarray(ds["sst"][:].filled(np.nan), dtype=np.float64)
    # (b)-style reference straight from the raw array: equal-weight monthly means
    ref = bench._window_means(raw[:, iy, ix], table._m0.to_numpy(), table._m1.to_numpy())
    for layout, path in paths.items():
        grid = open_grid(path, "sst")  # default chunks follow the file, as in the benchmark
        t0 = time.perf_counter()
        out = attach(rows, grid, name="sst", spatial="nearest-valid:25km", time_weights="equal", progress=False)
        per_row_a = (time.perf_counter() - t0) / n
        same = out["sst_flags"].to_numpy() == ""
        assert same.mean() > 0.9
        assert_allclose(out["sst"][same], ref[same], rtol=1e-6)
        moved = out["sst_flags"].str.startswith("nearest_valid_").fillna(False).to_numpy()
        assert np.isfinite(out["sst"][moved]).all()
        # the per-site .sel loop is slower per row, by far (issue: >= 500x at full size)
        per_row_c = bench.time_c(path, table, 30)
        assert per_row_c > 2 * per_row_a, layout
    # the process-parallel tile reader gives the same values
    monkeypatch.setattr(reader, "_PARALLEL_BYTES", 0)
    monkeypatch.setattr(reader, "_TILE_BYTES", 20_000)  # several tiles on this tiny grid
    monkeypatch.setenv("ENVLINK_READ_WORKERS", "2")
    grid = open_grid(paths["contiguous"], "sst", chunks={"time": -1, "lat": 18, "lon": 36})
    calls = []
    real = reader.read_rect
    monkeypatch.setattr(reader, "_workers", lambda *a: calls.append(a) or 2)
    par = attach(rows, grid, name="sst", spatial="nearest-valid:25km", time_weights="equal", progress=False)
    assert_allclose(par["sst"], out["sst"], rtol=0, atol=0, equal_nan=True)
    assert par["sst_flags"].tolist() == out["sst_flags"].tolist()
    assert calls and calls[0][2] > 1  # several tiles, read by a pool of 2 processes
    assert real is reader.read_rect


@pytest.mark.quick_benchmark
def test_quick_process_benchmark_csv_to_csv(bench, tmp_path):
    # (e) of bench_attach.py at a tiny size: whole 'envlink attach' against the streaming
    # reference process, one run each; the reference's equal-weight monthly means are
    # the duration-weighted means' neighbours (common practice: months differ by <= 3 days)
    import sys

    sys.path.insert(0, str(_BENCH.parent))
    ny, nx, nt, n = 36, 72, 24, 400
    grid = bench.write_grids(tmp_path, ny, nx, nt, layouts=("compressed",))["compressed"]
    rows = tmp_path / "rows.csv"
    bench.write_located_csv(bench.make_rows(n, ny, nx, nt), rows)
    rep = bench.process_benchmark(tmp_path, grid, rows, 1, "nearest-valid:50km", 2)
    got, ref = rep["rows_with_value"]
    assert got >= ref * 0.9 and rep["median_abs_difference"] < 0.05
    assert rep["envlink_peak_mib"] > 0 and rep["reference_peak_mib"] > 0
    assert "cells    read from the grid" in rep["envlink_stderr"]
