"""Permutation tests of one model: the extra time of ``envlink fit --permutations N``.

Run as a script (not collected by pytest):

    python tests/benchmarks/bench_permutations.py            # k = 300, 2000 permutations
    python tests/benchmarks/bench_permutations.py --quick    # small and fast

It writes a table of k effects from S studies (one normal moderator) to a temporary
folder and times whole ``envlink fit`` processes, alternating, with and without
``--permutations N --seed 1``, for the random-effects model (REML) and the
multilevel model (``--nested study``). The extra time (median with permutations
minus median without) gives permutations per second. The straightforward loop (one
refit per permutation, ``engine="refit"``) is timed in a child process on a subset
and scaled, for the ratio. Medians with min-max over the repeats.
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

import numpy as np

REPO = Path(__file__).resolve().parents[2]

LOOP = """
import sys, time, warnings
import pandas as pd
from envlink.metareg import MetaRegression
from envlink.metareg.permutation import permutation_test_model
df = pd.read_csv(sys.argv[1])
nested = sys.argv[2] == "nested"
m = MetaRegression(moderators="x", nested="study" if nested else None).fit(df, effect="y",
                                                                           variance="v")
n = int(sys.argv[3])
t = time.perf_counter()
permutation_test_model(m, n, 1, engine="refit", progress=False)
print(time.perf_counter() - t)
"""


def _data(folder: Path, k: int, studies: int, seed: int = 1) -> Path:
    rng = np.random.default_rng(seed)
    study = np.sort(rng.integers(0, studies, k))
    x = rng.normal(size=k)
    v = rng.uniform(0.01, 0.08, k)
    y = (0.2 + 0.05 * x + rng.normal(0, 0.25, studies)[study] + rng.normal(0, 0.1, k)
         + rng.normal(0, np.sqrt(v)))
    path = folder / "effects.csv"
    lines = ["y,v,x,study"] + [f"{a:.17g},{b:.17g},{c:.17g},s{d}" for a, b, c, d in zip(y, v, x, study,
                                                                                 strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return path


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(REPO)}


def _time(cmd: list[str]) -> float:
    t = time.perf_counter()
    subprocess.run(cmd, check=True, env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def _case(data: Path, folder: Path, nested: bool, n: int, repeats: int, loop_n: int) -> dict:
    base = [sys.executable, "-m", "envlink", "fit", str(data), "--effect", "y", "--variance", "v",
            "--moderators", "x", "--json", str(folder / "f.json")]
    if nested:
        base += ["--nested", "study"]
    perm = base + ["--permutations", str(n), "--seed", "1"]
    _time(base)  # warm the file cache and imports
    plain, withp = [], []
    for r in range(repeats):
        order = [(base, plain), (perm, withp)] if r % 2 == 0 else [(perm, withp), (base, plain)]
        for cmd, out in order:
            out.append(_time(cmd))
    extra = statistics.median(withp) - statistics.median(plain)
    loop = float(subprocess.run([sys.executable, "-c", LOOP, str(data), "nested" if nested else "re",
                                 str(loop_n)], check=True, env=_env(), capture_output=True,
                                text=True).stdout.strip())
    per_loop = loop / loop_n
    return {"model": "multilevel (nested)" if nested else "random effects (REML)",
            "without_s": [statistics.median(plain), min(plain), max(plain)],
            "with_s": [statistics.median(withp), min(withp), max(withp)],
            "extra_s": extra, "permutations_per_s": n / extra if extra > 0 else float("inf"),
            "loop_ms_per_permutation": 1000 * per_loop,
            "loop_over_fast": per_loop * n / extra if extra > 0 else float("inf")}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="k = 60, 200 permutations, 1 repeat")
    ap.add_argument("--k", type=int, default=300)
    ap.add_argument("--studies", type=int, default=100)
    ap.add_argument("--permutations", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--json", type=Path, default=None, help="write the figures as JSON")
    a = ap.parse_args()
    if a.quick:
        a.k, a.studies, a.permutations, a.repeats = 60, 20, 200, 1
    with tempfile.TemporaryDirectory(prefix="envlink-bench-perm-") as tmp:
        folder = Path(tmp)
        data = _data(folder, a.k, a.studies)
        out = [_case(data, folder, nested, a.permutations, a.repeats,
                     loop_n=20 if a.quick else 100) for nested in (False, True)]
    print(f"k = {a.k} effects from {a.studies} studies, {a.permutations} permutations, "
          f"{a.repeats} repeats (whole processes, alternating; medians (min-max))")
    for r in out:
        print(f"  {r['model']}: without {r['without_s'][0]:.2f} s ({r['without_s'][1]:.2f}-"
              f"{r['without_s'][2]:.2f}), with {r['with_s'][0]:.2f} s ({r['with_s'][1]:.2f}-"
              f"{r['with_s'][2]:.2f}); extra {r['extra_s']:.2f} s = "
              f"{r['permutations_per_s']:.0f} permutations/s; refit loop "
              f"{r['loop_ms_per_permutation']:.2f} ms/permutation, {r['loop_over_fast']:.1f}x slower")
    if a.json:
        a.json.write_text(json.dumps({"settings": vars(a) | {"json": str(a.json)}, "results": out},
                                     indent=2))


if __name__ == "__main__":
    main()
