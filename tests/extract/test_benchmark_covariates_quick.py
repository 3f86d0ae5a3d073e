"""Quick variant of tests/benchmarks/bench_covariates.py: eight covariates through ``envlink run``."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_covariates.py"


@pytest.mark.quick_benchmark
def test_quick_eight_covariates_and_the_store(tmp_path: Path) -> None:
    sys.path.insert(0, str(_BENCH.parent))
    spec = importlib.util.spec_from_file_location("bench_covariates", _BENCH)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    bench.write_inputs(tmp_path, 36, 72, 360, 300, "nearest-valid:50km")
    rep = bench.benchmark(tmp_path, 1)
    assert rep["warm_equals_cold"] and rep["mean_equals_one_covariate"]
    assert rep["cells_after_one"] == ["store"]  # the run after the one-covariate run read no grid
    assert all(v > 200 for v in rep["rows_with_value"].values())
    # eight covariates from one read cost far less than eight runs (start-up dominates here)
    assert rep["eight_over_one"] < 3.0
