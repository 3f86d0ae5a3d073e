"""Benchmark: group-wise effect sizes from raw records in Parquet, as whole processes, against DuckDB.

Run as a script (not collected by pytest)::

    python tests/benchmarks/bench_group_effects.py              # 2e8 records, 1e7 groups
    python tests/benchmarks/bench_group_effects.py --quick      # 2e5 records, 1e4 groups
    python tests/benchmarks/bench_group_effects.py --rows 5e7 --groups 2.5e6 --repeats 3

Data (made by a child process in a temporary folder, about 26 bytes a record):
``group`` (int64, uniform over the groups, so a group's records are scattered over
the whole file: about 20 records a group), ``x``, ``y`` (float64, y = 0.3 x + noise),
``ill`` (int8 0/1, p = 0.2) and ``arm`` (int8, 1 or 2), in one Parquet file with
row groups of 2^20 records.

Each round runs, as fresh processes in alternating order:

- envlink: ``envlink.group_effects(PATH, "group", KIND, ...)`` (streams the row
  groups; the per-group summary, then effect, variance and flags for every group, in
  order of first appearance), its table written to Parquet;
- the reference: one DuckDB SQL aggregate of the same sums over the same file
  (``count`` and ``corr`` / the count and the 1s / per-arm ``count``, ``avg`` and
  ``stddev_samp``, grouped by ``group``, in no particular order), written to Parquet
  with DuckDB's ``COPY``: the aggregation alone (no check of missing or non-finite
  values, no order of first appearance, no effect sizes), with a 3 GB memory limit
  as envlink's own.

Wall time around each process and its peak resident memory (``VmHWM``, tests/benchmarks/_process.py). Fisher's
z is timed in every round; the proportion (logit) and Hedges' g once each. A spot
check compares 1,000 random groups' r with ``numpy.corrcoef`` of their records.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent

GENERATE = """
import numpy as np, pyarrow as pa, pyarrow.parquet as pq
rows, groups, out = {rows}, {groups}, {out!r}
rng = np.random.default_rng(7)
schema = pa.schema([("group", pa.int64()), ("x", pa.float64()), ("y", pa.float64()),
                    ("ill", pa.int8()), ("arm", pa.int8())])
step = 1 << 20
with pq.ParquetWriter(out, schema) as w:
    for lo in range(0, rows, step):
        n = min(step, rows - lo)
        x = rng.normal(size=n)
        t = pa.table({{"group": rng.integers(0, groups, n), "x": x,
                      "y": 0.3 * x + rng.normal(size=n),
                      "ill": (rng.random(n) < 0.2).astype(np.int8),
                      "arm": rng.integers(1, 3, n).astype(np.int8)}}, schema=schema)
        w.write_table(t, row_group_size=step)
"""

ENVLINK = """
import sys, envlink
path, kind, out = sys.argv[1:4]
cols = {{"fisher_z": dict(x="x", y="y"), "logit_proportion": dict(outcome="ill"),
        "hedges_g": dict(value="y", arm="arm", arms=(1, 2))}}[kind]
envlink.group_effects(path, "group", kind, **cols).to_parquet(out)
"""

DUCKDB = """
import sys, duckdb
path, kind, out = sys.argv[1:4]
aggs = {{
    "fisher_z": "count(*) AS n, corr(x, y) AS r",
    "logit_proportion": "count(*) AS n, count(*) FILTER (WHERE ill = 1) AS events",
    "hedges_g": ", ".join(f"count(*) FILTER (WHERE arm = {{i}}) AS n{{i}}, "
                          f"avg(y) FILTER (WHERE arm = {{i}}) AS mean{{i}}, "
                          f"stddev_samp(y) FILTER (WHERE arm = {{i}}) AS sd{{i}}" for i in (1, 2)),
}}[kind]
con = duckdb.connect(config={{"memory_limit": "3GB", "temp_directory": sys.argv[4]}})
con.execute(f"COPY (SELECT \\"group\\", {{aggs}} FROM read_parquet('{{path}}') GROUP BY \\"group\\") "
            f"TO '{{out}}' (FORMAT parquet)")
"""


def run_process(cmd: list[str]) -> tuple[float, float]:
    """Wall seconds and peak resident memory in MiB of the process and its children.

    Memory is each process's own high-water mark (``VmHWM``, tests/benchmarks/_process.py),
    not ``ru_maxrss``: Linux carries ``ru_maxrss`` over from the parent through fork and
    exec, so a child of a large process (a pytest worker) would report the parent's size.
    """
    sys.path.insert(0, str(HERE))
    from _process import launcher, run_measured

    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    run = run_measured(launcher(cmd[1:]) if cmd[0] == sys.executable else cmd, env=env, cwd=tempfile.gettempdir())
    wall, peak = float(run["seconds"]), float(run["peak_mib"])  # type: ignore[arg-type]
    return wall, peak


def _stats(xs: list[float]) -> dict[str, float]:
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "runs": len(xs)}


def spot_check(table: Path, out: Path, count: int = 1000) -> float:
    """Largest |r - numpy.corrcoef| over ``count`` random groups (their records read by DuckDB)."""
    import duckdb
    import numpy as np
    import pandas as pd

    res = pd.read_parquet(out, columns=["group", "n", "r"])
    rng = np.random.default_rng(1)
    pick = res.iloc[rng.choice(len(res), size=min(count, len(res)), replace=False)]
    pick = pick[pick["n"] >= 3]
    ids = ",".join(str(int(g)) for g in pick["group"])
    rec = duckdb.sql(f"SELECT \"group\", x, y FROM read_parquet('{table}') "
                     f"WHERE \"group\" IN ({ids})").df()
    worst = 0.0
    for key, part in rec.groupby("group"):
        r = np.corrcoef(part["x"], part["y"])[0, 1]
        worst = max(worst, abs(float(pick.loc[pick["group"] == key, "r"].iloc[0]) - r))
    return worst


def bench(rows: int, groups: int, repeats: int, folder: Path, records: Path | None = None) -> dict:
    table = records or folder / "records.parquet"
    t0 = time.perf_counter()
    if records is None:
        subprocess.run([sys.executable, "-c", GENERATE.format(rows=rows, groups=groups,
                                                              out=str(table))], check=True)
    made = time.perf_counter() - t0
    env_script, ref_script = folder / "envlink_run.py", folder / "duckdb_run.py"
    env_script.write_text(ENVLINK.format())
    ref_script.write_text(DUCKDB.format())
    res: dict = {"rows": rows, "groups": groups, "table_gb": table.stat().st_size / 1e9,
                 "generate_s": made, "kinds": {}}
    for kind, rounds in (("fisher_z", repeats), ("logit_proportion", 1), ("hedges_g", 1)):
        cmds = {"envlink": [sys.executable, str(env_script), str(table), kind, str(folder / "e.parquet")],
                "duckdb": [sys.executable, str(ref_script), str(table), kind, str(folder / "d.parquet"),
                           str(folder / "spill")]}
        times: dict[str, list[float]] = {"envlink": [], "duckdb": []}
        peaks: dict[str, list[float]] = {"envlink": [], "duckdb": []}
        for i in range(rounds):
            for name in (("envlink", "duckdb") if i % 2 == 0 else ("duckdb", "envlink")):
                wall, peak = run_process(cmds[name])
                print(f"  {kind} {name}: {wall:.1f} s, {peak:.0f} MiB", flush=True)
                times[name].append(wall)
                peaks[name].append(peak)
        te, td = _stats(times["envlink"]), _stats(times["duckdb"])
        res["kinds"][kind] = {"envlink_s": te, "duckdb_s": td, "ratio": te["median"] / td["median"],
                              "envlink_peak_mib": max(peaks["envlink"]),
                              "duckdb_peak_mib": max(peaks["duckdb"])}
        if kind == "fisher_z":
            res["kinds"][kind]["spot_check_max_abs_r_diff"] = spot_check(table, folder / "e.parquet")
        print(f"{kind}: envlink {te['median']:.1f} s [{te['min']:.1f}-{te['max']:.1f}], "
              f"DuckDB aggregate {td['median']:.1f} s [{td['min']:.1f}-{td['max']:.1f}], "
              f"ratio {te['median'] / td['median']:.2f}; peak {max(peaks['envlink']):.0f} MiB vs "
              f"{max(peaks['duckdb']):.0f} MiB", flush=True)
    res["load_average"] = os.getloadavg()
    return res


def main(argv: list[str] | None = None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, default=2e8)
    ap.add_argument("--groups", type=float, default=1e7)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="2e5 records in 1e4 groups, one round")
    ap.add_argument("--records", type=Path, default=None,
                    help="use this records file (made by an earlier run) instead of a new one")
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    rows, groups, repeats = ((200_000, 10_000, 1) if args.quick
                             else (int(args.rows), int(args.groups), args.repeats))
    with tempfile.TemporaryDirectory(prefix="envlink-bench-groups-") as tmp:
        res = bench(rows, groups, repeats, Path(tmp), args.records)
    if args.json:
        args.json.write_text(json.dumps(res, indent=2))
    return res


if __name__ == "__main__":
    main()
