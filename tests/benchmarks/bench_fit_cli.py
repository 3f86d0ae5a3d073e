"""Benchmark: ``envlink fit`` on a big Parquet table as a whole process, against a tight reference.

Run as a script (not collected by pytest)::

    python tests/benchmarks/bench_fit_cli.py                 # k = 1.7e7, 3 rounds
    python tests/benchmarks/bench_fit_cli.py --quick         # k = 2e5, 1 round
    python tests/benchmarks/bench_fit_cli.py --k 1e6 --repeats 5 --json out.json

The table (``y``, ``v``, ``x1``, ``x2``: simulated Fisher's z effects as in
bench_metareg.py, tau² = 0.01, written with pyarrow's default row groups) is made in
a temporary folder by a child process. Each round runs, in alternating order,

- ``envlink fit TABLE --effect y --variance v --moderators "x1 + x2" --method REML
  --json OUT`` (tau² and its Q-profile interval, R², I², H², Q_E, Q_M, coefficients
  with SEs, z, p and CIs), and
- the reference process ``reference_fit.py`` beside this file (its docstring says
  exactly what it computes: the same values, pyarrow + blocked NumPy),

each as a fresh Python process, timed wall-clock around the process, with its peak
resident memory (``VmHWM`` of the process and its children, tests/benchmarks/_process.py). One untimed
run of each first fills the page cache and numba's kernel cache. Reports medians with
min-max, the ratio envlink / reference, and the largest relative difference between
the two processes' answers.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent

GENERATE = """
import sys
sys.path.insert(0, {here!r})
import pyarrow as pa, pyarrow.parquet as pq
from bench_metareg import simulate
y, v, X = simulate({k})
pq.write_table(pa.table({{"y": y, "v": v, "x1": X[:, 0], "x2": X[:, 1]}}), {out!r})
"""


def run_process(cmd: list[str]) -> tuple[float, float, int]:
    """Wall seconds and peak resident memory in MiB of the process and its children.

    Memory is each process's own high-water mark (``VmHWM``, tests/benchmarks/_process.py),
    not ``ru_maxrss``: Linux carries ``ru_maxrss`` over from the parent through fork and
    exec, so a child of a large process (a pytest worker) would report the parent's size.
    """
    sys.path.insert(0, str(HERE))
    from _process import launcher, run_measured

    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    run = run_measured(launcher(cmd[1:]) if cmd[0] == sys.executable else cmd, env=env, cwd=None)
    wall, peak = float(run["seconds"]), float(run["peak_mib"])  # type: ignore[arg-type]
    return wall, peak, 0


def _flat(d: object, pre: str = "") -> dict[str, float]:
    out: dict[str, float] = {}
    if isinstance(d, dict):
        for k, v in d.items():
            out.update(_flat(v, f"{pre}.{k}"))
    elif isinstance(d, list):
        for i, v in enumerate(d):
            out.update(_flat(v, f"{pre}[{i}]"))
    elif isinstance(d, float | int) and not isinstance(d, bool):
        out[pre] = float(d)
    return out


def compare(env_json: Path, ref_json: Path) -> dict[str, float]:
    """Largest relative difference per field group between envlink's and the reference's answers."""
    doc = json.loads(env_json.read_text())
    r = _flat(json.loads(ref_json.read_text()))
    h, m = doc["heterogeneity"], doc["moderator_test"]  # fit.json format 2.0 sections
    e = {"tau2": h["tau2"], "tau2_ci": [h["tau2_interval"]["low"], h["tau2_interval"]["high"]],
         "I2": h["I2_percent"], "H2": h["H2"], "R2": h["R2_percent"], "Q_E": h["residual_test"]["Q_E"],
         "Q_E_p": h["residual_test"]["p"], "Q_M": m["Q_M"], "Q_M_p": m["p"]}
    mine = _flat(e)
    mine.update(_flat({"coefficients": [{k: c[k] for k in ("estimate", "se", "statistic", "p",
                                                           "ci_low", "ci_high")}
                                        for c in doc["coefficients"]["table"]]}))
    worst: dict[str, float] = {}
    for key, val in mine.items():
        ref = r[key]
        group = key.split("[")[0].split(".")[1] if key.startswith(".coefficients") else key
        scale = max(abs(ref), 1e-300) if key.split(".")[-1] != "p" else 1.0
        worst[group] = max(worst.get(group, 0.0), abs(val - ref) / scale)
    return worst


def _stats(xs: list[float]) -> dict[str, float]:
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "runs": len(xs)}


def bench(k: int, repeats: int, folder: Path) -> dict:
    table = folder / "big.parquet"
    subprocess.run([sys.executable, "-c", GENERATE.format(here=str(HERE), k=k, out=str(table))],
                   check=True)
    env_out, ref_out = folder / "envlink.json", folder / "reference.json"
    envlink_cmd = [sys.executable, "-m", "envlink", "fit", str(table), "--effect", "y",
                   "--variance", "v", "--moderators", "x1 + x2", "--method", "REML",
                   "--json", str(env_out), "--force"]
    ref_cmd = [sys.executable, str(HERE / "reference_fit.py"), str(table), "y", "v", "x1,x2",
               str(ref_out)]
    run_process(envlink_cmd)  # page cache and numba's kernel cache
    run_process(ref_cmd)
    times: dict[str, list[float]] = {"envlink": [], "reference": []}
    peaks: dict[str, list[float]] = {"envlink": [], "reference": []}
    for i in range(repeats):
        order = [("envlink", envlink_cmd), ("reference", ref_cmd)]
        for name, cmd in order if i % 2 == 0 else order[::-1]:
            wall, peak, _ = run_process(cmd)
            times[name].append(wall)
            peaks[name].append(peak)
    te, tr = _stats(times["envlink"]), _stats(times["reference"])
    return {
        "k": k, "table_mb": round(table.stat().st_size / 2**20, 1),
        "envlink_s": te, "reference_s": tr, "ratio": te["median"] / tr["median"],
        "envlink_peak_mib": _stats(peaks["envlink"]), "reference_peak_mib": _stats(peaks["reference"]),
        "max_rel_diff": compare(env_out, ref_out),
        "load_average": os.getloadavg(),
    }


def main(argv: list[str] | None = None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--k", type=float, default=1.7e7)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="k = 2e5, one round")
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    k, repeats = (200_000, 1) if args.quick else (int(args.k), args.repeats)
    with tempfile.TemporaryDirectory(prefix="envlink-bench-fit-") as tmp:
        res = bench(k, repeats, Path(tmp))
    e, r = res["envlink_s"], res["reference_s"]
    print(f"k={k}: envlink {e['median']:.2f} s [{e['min']:.2f}-{e['max']:.2f}], reference "
          f"{r['median']:.2f} s [{r['min']:.2f}-{r['max']:.2f}], ratio {res['ratio']:.2f}; "
          f"peak {res['envlink_peak_mib']['median']:.0f} MiB vs "
          f"{res['reference_peak_mib']['median']:.0f} MiB; "
          f"max rel diff {max(res['max_rel_diff'].values()):.1e}")
    if args.json:
        args.json.write_text(json.dumps(res, indent=2))
    return res


if __name__ == "__main__":
    main()
