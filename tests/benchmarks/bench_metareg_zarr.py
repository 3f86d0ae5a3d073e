"""Benchmark: REML on k = 10^8 effects stored as Zarr (float32 storage, float64 sums).

Run as a script (not collected by pytest)::

    python tests/benchmarks/bench_metareg_zarr.py              # k = 1e8 (1.6 GB store)
    python tests/benchmarks/bench_metareg_zarr.py --quick      # k = 2e5
    python tests/benchmarks/bench_metareg_zarr.py --k 3e7 --chunk 4194304 --json out.json

A child process writes the store in a temporary folder: arrays ``y``, ``v``, ``x1``,
``x2`` (float32, chunks of 2^22 rows, Zarr's default compression), simulated as in
bench_metareg.py (Fisher's z effects, study sizes 12..400, tau² = 0.01, coefficients
0.3, 0.1, -0.05). Then, in this process:

- out of core: :func:`envlink.metareg.chunked.design_from_source` with
  ``persist=False`` (every pass reads the chunks from the store, on Dask's threaded
  scheduler) and ``MetaRegression(method="REML").fit(design)``: tau², its SE and
  Q-profile interval, R², the coefficients and SEs; against a plain read of the four
  arrays (one Dask pass summing each chunk);
- in memory: the arrays read into float32 NumPy arrays, the same fit, against one
  NumPy pass (``np.sum`` of each array).

Reports each fit's wall time, its passes over the data (calls of the sums), time
per pass against the plain read, and the recovery of the simulated values
(|estimate - truth| / SE).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

TAU2 = 0.01
BETA = np.array([0.3, 0.1, -0.05])

GENERATE = """
import numpy as np, zarr
k, chunk, out = {k}, {chunk}, {out!r}
rng = np.random.default_rng(2027)
g = zarr.open_group(out, mode="w")
arrs = {{c: g.create_array(c, shape=(k,), chunks=(chunk,), dtype="float32") for c in ("y", "v", "x1", "x2")}}
for lo in range(0, k, chunk):
    m = min(chunk, k - lo)
    n = rng.integers(12, 401, m)
    v = 1.0 / (n - 3)
    x = rng.normal(size=(m, 2))
    y = 0.3 + x @ [0.1, -0.05] + rng.normal(0, 0.1, m) + rng.normal(0, np.sqrt(v))
    for c, a in (("y", y), ("v", v), ("x1", x[:, 0]), ("x2", x[:, 1])):
        arrs[c][lo:lo + m] = a.astype(np.float32)
"""


def _counting():
    """Count the passes over the data (calls of the sums) made during a fit."""
    from envlink.metareg import _kernels

    calls = [0]
    orig = _kernels.weighted_sums_multi

    def counted(*a, **kw):
        calls[0] += 1
        return orig(*a, **kw)

    _kernels.weighted_sums_multi = counted
    import envlink.metareg.estimators as est
    import envlink.metareg.lockstep as ls

    est.weighted_sums_multi = counted
    ls.weighted_sums_multi = counted
    return calls


def _report(m, wall: float, passes: int, read_s: float) -> dict:
    se_tau = m.tau2_se_
    return {
        "fit_s": wall, "passes": passes, "per_pass_s": wall / passes, "plain_read_s": read_s,
        "per_pass_over_read": wall / passes / read_s,
        "tau2": m.tau2_, "tau2_se": se_tau, "tau2_ci": list(m.tau2_ci_), "R2": m.R2_,
        "coef": m.coef_.tolist(), "se": m.se_.tolist(),
        "recovery_in_se": {"tau2": abs(m.tau2_ - TAU2) / se_tau,
                           "coef": (np.abs(m.coef_ - BETA) / m.se_).tolist()},
    }


def bench(k: int, chunk: int, folder: Path) -> dict:
    import dask
    import dask.array as da

    from envlink.metareg import MetaRegression
    from envlink.metareg.chunked import design_from_source

    store = folder / "effects.zarr"
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", GENERATE.format(k=k, chunk=chunk, out=str(store))],
                   check=True)
    res: dict = {"k": k, "chunk": chunk, "generate_s": time.perf_counter() - t0,
                 "store_gb": sum(f.stat().st_size for f in store.rglob("*") if f.is_file()) / 1e9}
    calls = _counting()
    w = 600_000  # more than 8 blocks: the threaded kernel, float32 storage (compiled or loaded)
    rng = np.random.default_rng(0)
    MetaRegression().fit(y=rng.normal(size=w).astype(np.float32), v=np.full(w, 0.1, np.float32),
                         X=rng.normal(size=(w, 2)).astype(np.float32))
    arrays = [da.from_zarr(str(store), component=c) for c in ("y", "v", "x1", "x2")]
    t0 = time.perf_counter()
    dask.compute(*[a.sum(dtype=np.float64) for a in arrays])
    read_ooc = time.perf_counter() - t0
    d = design_from_source(store, effect="y", variance="v", moderators="x1 + x2", persist=False)
    calls[0] = 0
    t0 = time.perf_counter()
    m = MetaRegression(method="REML").fit(d)
    m.to_dict()
    res["out_of_core"] = _report(m, time.perf_counter() - t0, calls[0], read_ooc)
    print("out of core:", json.dumps(res["out_of_core"]), flush=True)
    y, v, x1, x2 = (np.asarray(a) for a in arrays)
    X = np.column_stack([x1, x2])
    del x1, x2
    t0 = time.perf_counter()
    for a in (y, v, X):
        np.sum(a, dtype=np.float64)
    read_mem = time.perf_counter() - t0
    calls[0] = 0
    t0 = time.perf_counter()
    m = MetaRegression(method="REML").fit(y=y, v=v, X=X)
    m.to_dict()
    res["in_memory"] = _report(m, time.perf_counter() - t0, calls[0], read_mem)
    print("in memory:", json.dumps(res["in_memory"]), flush=True)
    return res


def main(argv: list[str] | None = None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--k", type=float, default=1e8)
    ap.add_argument("--chunk", type=int, default=1 << 22)
    ap.add_argument("--quick", action="store_true", help="k = 2e5, chunks of 2^16")
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    k, chunk = (200_000, 1 << 16) if args.quick else (int(args.k), args.chunk)
    with tempfile.TemporaryDirectory(prefix="envlink-bench-zarr-") as tmp:
        res = bench(k, chunk, Path(tmp))
    if args.json:
        args.json.write_text(json.dumps(res, indent=2))
    return res


if __name__ == "__main__":
    main()
