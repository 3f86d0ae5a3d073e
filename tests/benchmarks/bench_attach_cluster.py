"""Benchmark of ``envlink attach --scheduler`` (cells read on a Dask cluster) against one machine.

Run from the repository root::

    python tests/benchmarks/bench_attach_cluster.py --quick    # small grid, a minute
    python tests/benchmarks/bench_attach_cluster.py            # 120 x 360 x 720, 20,000 rows

The grid is bench_attach.py's synthetic monthly SST (chunked (12, 90, 180), zlib level
1) at the size given; the rows are its ocean-ish sites with 1-36 month windows. A
scheduler (``dask scheduler``) and two worker processes of one thread each (``dask
worker --nworkers 2 --nthreads 1``) are started once, before the clock, and stay up.

Timed, whole processes from the command line, alternating order, in one run, each
with an empty cell-series store (a fresh ``$ENVLINK_CACHE``):
(1) ``envlink attach ... --spatial nearest-valid:25km`` on this machine (its own
reader, several processes for large reads); (c) the same with ``--scheduler
ADDRESS`` (the workers read the tiles and write the store). The outputs must be
byte-identical. Medians with min-max and their ratio are printed as JSON.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _process import launcher, run_measured, summary  # noqa: E402
from bench_attach import make_rows, write_grids  # noqa: E402


def start_cluster(folder: Path, env: dict[str, str]) -> tuple[str, list[subprocess.Popen]]:
    """A scheduler and two single-thread worker processes; the scheduler's address."""
    dask = shutil.which("dask") or "dask"
    info = folder / "scheduler.json"
    sched = subprocess.Popen([dask, "scheduler", "--port", "0", "--dashboard-address", ":0",
                              "--scheduler-file", str(info)], env=env, stderr=subprocess.DEVNULL)
    for _ in range(300):
        if info.exists() and info.read_text().strip():
            break
        time.sleep(0.1)
    workers = subprocess.Popen([dask, "worker", "--scheduler-file", str(info), "--nworkers", "2", "--nthreads", "1",
                                "--dashboard-address", ":0"], env=env, stderr=subprocess.DEVNULL)
    address = json.loads(info.read_text())["address"]
    from distributed import Client

    with Client(address, timeout="30s") as c:
        c.wait_for_workers(2, timeout=60)
    return address, [workers, sched]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="60 x 180 x 60 grid, 2,000 rows, 1 repeat")
    ap.add_argument("--size", nargs=4, type=int, metavar=("NT", "NY", "NX", "ROWS"), default=(120, 360, 720, 20000))
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    nt, ny, nx, n = (60, 60, 180, 2000) if args.quick else args.size
    repeats = 1 if args.quick else args.repeats
    repo = HERE.parents[1]
    env = {**os.environ, "PYTHONPATH": str(repo)}
    with tempfile.TemporaryDirectory(prefix="envlink-bench-cluster-") as tmp:
        d = Path(tmp)
        grid = write_grids(d, ny, nx, nt, layouts=("compressed",))["compressed"]
        make_rows(n, ny, nx, nt).iloc[:, :5].to_csv(d / "rows.csv", index=False)
        address, procs = start_cluster(d, env)
        try:
            base = ["-m", "envlink", "attach", str(d / "rows.csv"), "--grid", str(grid), "--name", "sst",
                    "--spatial", "nearest-valid:25km", "--no-progress", "--force"]
            cmds = {"one": base + ["-o", str(d / "one.csv")],
                    "cluster": base + ["-o", str(d / "cluster.csv"), "--scheduler", address]}
            runs: dict[str, list[dict]] = {k: [] for k in cmds}
            for r in range(repeats):
                for k in (list(cmds) if r % 2 == 0 else list(cmds)[::-1]):
                    cache = d / f"cache-{k}-{r}"
                    runs[k].append(run_measured(launcher(cmds[k]), env={**env, "ENVLINK_CACHE": str(cache)}))
                    shutil.rmtree(cache, ignore_errors=True)
            same = (d / "one.csv").read_bytes() == (d / "cluster.csv").read_bytes()
        finally:
            for p in procs:
                p.terminate()
                p.wait(timeout=30)
    secs = {k: summary([x["seconds"] for x in v]) for k, v in runs.items()}
    print(json.dumps({"grid": [nt, ny, nx], "rows": n, "identical_outputs": same, "seconds": secs,
                      "ratio_cluster_to_one": secs["cluster"]["median"] / secs["one"]["median"],
                      "client_peak_mib": {k: v[0]["peak_by_process_mib"][0] for k, v in runs.items()}}, indent=1))
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
