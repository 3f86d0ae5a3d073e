"""Benchmark of several covariates per read and of the cell-series store, through ``envlink run``.

Run from the repository root::

    python tests/benchmarks/bench_covariates.py --quick     # tiny grid, seconds
    python tests/benchmarks/bench_covariates.py --full      # 720 x 1440 x 360, 100,000 rows

The grid is bench_attach.py's 30-year monthly 0.25° field (chunked (12, 90, 180), zlib
level 1), starting in January 1991 so that it spans the 1991-2020 baseline. The
studies table holds the same rows as there, given as raw text columns ``lat``,
``lon``, ``start``, ``end`` (``envlink run`` locates them). Two project files on that
grid, ``nearest-valid:50km``, CSV out, no report:

- one covariate: the mean over the period;
- eight covariates: the mean, max, min and std over the period; the mean lagged by 3
  and by 12 months and over 12 months around the period's middle; the anomaly against
  1991-2020.

Timed, whole ``envlink run`` processes from the command line, alternating order, in one
run: (1) the one-covariate project with an empty store; (8) the eight-covariate project
with an empty store; (8w) the eight-covariate project right after (1) filled the store
(same cache folder). Targets: (8)/(1) <= 1.5 (stretch 1.2), (8w)/(1) <= 0.35. Peak
memory is the sum of every process's VmHWM. Medians with min-max are printed as JSON.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _process import launcher, run_measured, summary  # noqa: E402
from bench_attach import make_rows, write_grids  # noqa: E402

ORIGIN = "1991-01-01"
EIGHT = [("sst_mean", "mean", "period"), ("sst_max", "max", "period"), ("sst_min", "min", "period"),
         ("sst_std", "std", "period"), ("sst_lag3", "mean", "lag:3M"), ("sst_lag12", "mean", "lag:12M"),
         ("sst_mid12", "mean", "around-mid:12M"), ("sst_anom", "anomaly", "period")]


def project_text(covariates: list[tuple[str, str, str]], spatial: str) -> str:
    """A project file: the studies' raw columns, the grid, the covariates, CSV out."""
    blocks = "".join(
        f'\n[[covariates]]\nname = "{n}"\ngrid = "sst"\nstat = "{s}"\nwindow = "{w}"\nspatial = "{spatial}"\n'
        + ('baseline = "1991-2020"\n' if s == "anomaly" else "")
        for n, s, w in covariates)
    return ('[studies]\npath = "studies.csv"\n\n[locate]\nlat = "lat"\nlon = "lon"\nstart = "start"\nend = "end"\n\n'
            '[grids.sst]\npath = "sst_zlib1.nc"\nvariable = "sst"\n' + blocks
            + '\n[export]\nformats = ["csv"]\nreport = false\n')


def write_inputs(folder: Path, ny: int, nx: int, nt: int, n: int, spatial: str) -> float:
    """The grid, the studies table and both project files; returns the generation time."""
    t0 = time.perf_counter()
    write_grids(folder, ny, nx, nt, layouts=("compressed",), start=ORIGIN)
    gen = time.perf_counter() - t0
    rows = make_rows(n, ny, nx, nt, origin=ORIGIN)
    pd.DataFrame({"lat": rows.site_lat.round(5), "lon": rows.site_lon.round(5), "start": rows.period_start,
                  "end": rows.period_end}).to_csv(folder / "studies.csv", index=False)
    (folder / "one.toml").write_text(project_text(EIGHT[:1], spatial), encoding="utf-8")
    (folder / "eight.toml").write_text(project_text(EIGHT, spatial), encoding="utf-8")
    return gen


def _run(folder: Path, project: str, out: str, cache: str) -> dict[str, object]:
    env = {**os.environ, "PYTHONPATH": str(HERE.parents[1]), "ENVLINK_CACHE": cache}
    cmd = launcher(["-m", "envlink", "run", str(folder / project), "--out", str(folder / out), "--force",
                    "--no-progress"])
    return run_measured(cmd, env=env)


def benchmark(folder: Path, reps: int) -> dict[str, object]:
    """(1), (8) and (8w), alternating, ``reps`` times each."""
    runs: dict[str, list[dict[str, object]]] = {"one": [], "eight": [], "eight_after_one": []}
    for r in range(reps):
        cold = [tempfile.mkdtemp(dir=folder, prefix="cache-") for _ in range(2)]

        def one_then_eight(cold: list[str] = cold) -> None:
            runs["one"].append(_run(folder, "one.toml", "out_one", cold[0]))
            runs["eight_after_one"].append(_run(folder, "eight.toml", "out_eight_warm", cold[0]))

        def eight(cold: list[str] = cold) -> None:
            runs["eight"].append(_run(folder, "eight.toml", "out_eight", cold[1]))

        for step in (one_then_eight, eight) if r % 2 == 0 else (eight, one_then_eight):
            step()
    s = {k: summary([float(x["seconds"]) for x in v]) for k, v in runs.items()}  # type: ignore[arg-type]
    cold8 = pd.read_csv(folder / "out_eight" / "enriched.csv")
    warm8 = pd.read_csv(folder / "out_eight_warm" / "enriched.csv")
    one = pd.read_csv(folder / "out_one" / "enriched.csv")
    names = [n for n, _, _ in EIGHT]
    same = all(np.array_equal(cold8[c].to_numpy(), warm8[c].to_numpy(), equal_nan=True) for c in names)
    return {
        "seconds": s,
        "eight_over_one": s["eight"]["median"] / s["one"]["median"],
        "eight_after_one_over_one": s["eight_after_one"]["median"] / s["one"]["median"],
        "peak_mib": {k: max(float(x["peak_mib"]) for x in v) for k, v in runs.items()},  # type: ignore[arg-type]
        "processes_mib": {k: v[0]["peak_by_process_mib"] for k, v in runs.items()},
        "warm_equals_cold": same,
        "mean_equals_one_covariate": bool(np.array_equal(one["sst_mean"].to_numpy(), cold8["sst_mean"].to_numpy(),
                                                         equal_nan=True)),
        "rows_with_value": {c: int(cold8[c].notna().sum()) for c in names},
        "cells_after_one": sorted({v["cells"] for v in json.loads(
            (folder / "out_eight_warm" / "datapackage.json").read_text())["envlink"]["covariates"].values()}),
        "stderr_warm": str(runs["eight_after_one"][-1]["stderr"])[-400:],
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    size = p.add_mutually_exclusive_group()
    size.add_argument("--quick", action="store_true", help="tiny grid (default)")
    size.add_argument("--full", action="store_true", help="720 x 1440 x 360 grid, 100,000 rows")
    p.add_argument("--size", nargs=4, type=int, metavar=("NY", "NX", "NT", "ROWS"), help="a custom size")
    p.add_argument("--repeats", type=int, default=None, help="repeats of each run (default 3 full, 2 quick)")
    p.add_argument("--spatial", default="nearest-valid:50km", help="the spatial rule (default nearest-valid:50km)")
    p.add_argument("--workdir", help="folder for the data (default: a temporary folder, removed)")
    args = p.parse_args(argv)
    if args.size:
        (ny, nx, nt, n), reps = args.size, 3
    elif args.full:
        ny, nx, nt, n, reps = 720, 1440, 360, 100_000, 3
    else:
        ny, nx, nt, n, reps = 72, 144, 360, 2_000, 2
    reps = args.repeats or reps
    with tempfile.TemporaryDirectory(dir=args.workdir) as tmp:
        folder = Path(tmp)
        gen = write_inputs(folder, ny, nx, nt, n, args.spatial)
        report = {"grid": [nt, ny, nx], "rows": n, "repeats": reps, "spatial": args.spatial, "generate_s": gen,
                  **benchmark(folder, reps)}
    print(json.dumps(report, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
