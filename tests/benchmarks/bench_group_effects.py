"""Benchmark: group-wise effect sizes over 10^7 groups (a script; not collected by pytest).

Run: ``python tests/benchmarks/bench_group_effects.py [--groups N] [--repeats R]``.

Simulates records with 4 to 8 observations per group (shuffled, so a group's records
are not contiguous), then times :func:`envlink.group_effects` for Fisher's z (a
correlation per group) and for a logit proportion (a 0/1 outcome per group), beside two
references: ``pandas.factorize`` of the group column alone (the grouping step any
hash-based method pays) and pandas' ``groupby(...).agg(["sum", "count"])`` (the counts a
proportion needs). Prints medians of the repeats, records per second, the ratios, and a
spot check of 1000 groups against ``numpy.corrcoef`` / counting each group's records.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import numpy as np
import pandas as pd

import envlink


def simulate(groups: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(4, 9, groups)
    g = np.repeat(np.arange(groups, dtype=np.int64), sizes)
    perm = rng.permutation(g.size)
    g = g[perm]
    x = rng.normal(size=g.size)
    y = 0.3 * x + rng.normal(size=g.size)
    outcome = (rng.random(g.size) < 0.2).astype(np.int8)
    return pd.DataFrame({"group": g, "x": x, "y": y, "ill": outcome})


def spot_check(rec: pd.DataFrame, out_z: pd.DataFrame, out_p: pd.DataFrame, count: int = 1000) -> float:
    rng = np.random.default_rng(1)
    pick = set(rng.choice(len(out_z), size=min(count, len(out_z)), replace=False).tolist())
    labels = out_z["group"].to_numpy()
    chosen = [i for i in range(len(labels)) if i in pick]
    want = {labels[i]: i for i in chosen}
    sub = rec[rec["group"].isin(list(want))]
    worst = 0.0
    for key, part in sub.groupby("group"):
        i = want[key]
        r = np.corrcoef(part["x"], part["y"])[0, 1]
        worst = max(worst, abs(out_z["r"].iloc[i] - r))
        assert int(out_p["events"].iloc[i]) == int(part["ill"].sum())
        assert int(out_p["n"].iloc[i]) == len(part)
    return worst


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--groups", type=int, default=10_000_000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    rec = simulate(args.groups)
    print(f"simulated {len(rec):,} records in {args.groups:,} groups ({time.perf_counter() - t0:.1f} s)")
    timings: dict[str, list[float]] = {
        "fisher_z": [],
        "logit_proportion": [],
        "pandas factorize": [],
        "pandas groupby": [],
    }
    out_z = out_p = None
    for _ in range(args.repeats):
        # references: the grouping step alone, and pandas' own per-group sum and count
        t = time.perf_counter()
        pd.factorize(rec["group"], use_na_sentinel=False)
        timings["pandas factorize"].append(time.perf_counter() - t)
        t = time.perf_counter()
        rec.groupby("group", sort=False)["ill"].agg(["sum", "count"])
        timings["pandas groupby"].append(time.perf_counter() - t)
        t = time.perf_counter()
        out_z = envlink.group_effects(rec, "group", "fisher_z", x="x", y="y")
        timings["fisher_z"].append(time.perf_counter() - t)
        t = time.perf_counter()
        out_p = envlink.group_effects(rec, "group", "logit_proportion", outcome="ill")
        timings["logit_proportion"].append(time.perf_counter() - t)
    assert out_z is not None and out_p is not None
    assert len(out_z) == args.groups and len(out_p) == args.groups
    med = {kind: statistics.median(ts) for kind, ts in timings.items()}
    for kind, m in med.items():
        print(f"{kind:>17}: median {m:.2f} s of {args.repeats} ({len(rec) / m / 1e6:.1f} M records/s)")
    print(
        f"ratios: fisher_z / factorize = {med['fisher_z'] / med['pandas factorize']:.2f}, "
        f"logit_proportion / pandas groupby sum+count = "
        f"{med['logit_proportion'] / med['pandas groupby']:.2f}"
    )
    worst = spot_check(rec, out_z, out_p)
    print(f"spot check of 1000 groups: max |r - numpy.corrcoef| = {worst:.2e}")
    return 0 if worst < 1e-9 else 1


if __name__ == "__main__":
    sys.exit(main())
