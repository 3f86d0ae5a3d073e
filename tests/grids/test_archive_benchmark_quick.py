"""Quick variant of tests/benchmarks/bench_archive.py: 120 small daily files, dhw-max against the reference.

The reference is the benchmark's own bare netCDF4 loop (2 processes, latitude band,
cumulative sums), which computes degree heating weeks as docs/extract.md defines
them (HotSpot = SST − MMM; HotSpots ≥ 1 °C summed over the trailing 84 days, / 7,
in °C-weeks; Liu et al. 2014); envlink must agree to 1e-4 °C-weeks.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

from envlink.cli import main

_BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_archive.py"


@pytest.fixture(scope="module")
def bench():
    spec = importlib.util.spec_from_file_location("bench_archive", _BENCH)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.quick_benchmark
def test_quick_archive_benchmark_values(bench, tmp_path, capsys):
    files = tmp_path / "files"
    bench.write_archive(files, 120, 72, 144, workers=1)
    sites = bench.make_sites(200, 120, 72, 144, window_days=16)
    sites.to_csv(tmp_path / "sites.csv", index=False)
    bench.run_reference(files, tmp_path / "sites.csv", tmp_path / "ref.csv")
    code = main(["attach", str(tmp_path / "sites.csv"), "--grid", str(files / "*.nc"), "--name", "dhw",
                 "--stat", "dhw-max", "--mmm", str(bench.MMM), "-o", str(tmp_path / "out.csv"), "--no-cache"])
    assert code == 0
    assert "values       200" in capsys.readouterr().err
    assert bench.compare(tmp_path / "out.csv", tmp_path / "ref.csv") <= 1e-4  # °C-weeks
