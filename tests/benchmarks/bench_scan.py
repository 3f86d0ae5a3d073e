"""Window scan at scale: 200 windows x 1000 permutations, k = 300 effects from 100 studies, nested.

Run as a script (not collected by pytest):

    python tests/benchmarks/bench_scan.py             # the full run
    python tests/benchmarks/bench_scan.py --quick     # small and fast

It writes a daily sea-surface temperature grid (netCDF, 4 years, 16 x 16 cells) and a
located table of k effects from S studies (each study one site, its rows sampled on
different dates; no effect is planted: this is a timing run) to a temporary folder,
then times:

- (a) the whole ``envlink scan`` process (lags 0..95:5 x spans 7..70:7 days = 200
  windows, statistic mean, anchored at the period start, ``--nested study``,
  ``--permutations 1000``), as users run it, reading the grid itself (``--no-cache``:
  the cell-series store neither read nor written);
- (b) in one child process, the two parts apart: the extraction of the family
  (:func:`envlink.extract.family.extract_family`: each cell's series read once into
  a shared cell series, every window computed from it) and the model part (every window's fit and the
  permutations, :func:`envlink.metareg.scan.scan_windows`);
- (c) the straightforward loop of single fits (``MetaRegression(nested=...)`` once per
  window and permutation) on a subset, scaled to 200 x 1001 fits, for the ratio.

The first run in a fresh install also compiles the optional kernel (numba); a
warm-up run compiles it before the clock. Medians with min-max over the repeats.
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

PARTS = """
import json, sys, time, warnings
import pandas as pd
import envlink
from envlink.extract.family import WindowFamily
from envlink.metareg.scan import scan_windows
from envlink.project.scan import candidate_columns
table = pd.read_csv(sys.argv[1])
grid = envlink.open_grid(sys.argv[2], "sst")
fam = WindowFamily.make(lags=sys.argv[3], spans=sys.argv[4], unit="D")
t = time.perf_counter()
cand = candidate_columns(table, grid, fam, progress=False)
t_ext = time.perf_counter() - t
t = time.perf_counter()
r = scan_windows(table, cand, effect="y", variance="v", nested="study", windows=fam.describe(),
                 n_permutations=int(sys.argv[5]), seed=1, progress=False)
t_model = time.perf_counter() - t
from envlink.metareg import MetaRegression
names = list(cand.columns[:int(sys.argv[6])])
t = time.perf_counter()
n = 0
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    for name in names:
        for rep in range(2):
            d = table.assign(x=cand[name].sample(frac=1.0, random_state=rep).to_numpy())
            MetaRegression(moderators="x", nested="study").fit(d, effect="y", variance="v")
            n += 1
t_fit = (time.perf_counter() - t) / n
print(json.dumps({"extraction_s": t_ext, "model_s": t_model, "single_fit_ms": 1000 * t_fit,
                  "windows": r.n_windows, "best": r.best, "family_p": r.family_p}))
"""


def _write(folder: Path, k: int, studies: int, seed: int = 1) -> tuple[Path, Path]:
    import pandas as pd
    import xarray as xr

    rng = np.random.default_rng(seed)
    days = pd.date_range("2000-01-01", "2003-12-31", freq="D")
    lat = np.arange(16) * 0.25 - 10.0
    lon = np.arange(16) * 0.25 + 110.0
    doy = days.day_of_year.to_numpy()
    season = 27.0 + 1.5 * np.sin(2 * np.pi * doy / 365.25)
    noise = np.cumsum(rng.normal(0, 0.15, (len(days), 16, 16)), axis=0) * 0.05
    sst = (season[:, None, None] + noise).astype(np.float32)
    ds = xr.Dataset({"sst": (("time", "lat", "lon"), sst, {"units": "degC"})},
                    coords={"time": days, "lat": lat, "lon": lon})
    grid = folder / "sst_daily.nc"
    ds.to_netcdf(grid)
    study = np.sort(rng.integers(0, studies, k))
    site = rng.integers(0, 16, (studies, 2))
    start = pd.Timestamp("2001-01-01") + pd.to_timedelta(rng.integers(0, 900, k), unit="D")
    table = pd.DataFrame({
        "study": [f"s{s}" for s in study], "site_lat": lat[site[study, 0]],
        "site_lon": lon[site[study, 1]], "period_start": start.strftime("%Y-%m-%d"),
        "period_end": (start + pd.Timedelta(days=10)).strftime("%Y-%m-%d")})
    table["v"] = rng.uniform(0.01, 0.05, k)
    table["y"] = rng.normal(0, 0.2, studies)[study] + rng.normal(0, np.sqrt(table["v"] + 0.01))
    path = folder / "located.csv"
    table.to_csv(path, index=False)
    return path, grid


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(REPO)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="12 windows, 50 permutations, k = 60")
    ap.add_argument("--repeats", type=int, default=1, help="whole-process repeats (default 1)")
    ap.add_argument("--json", type=Path, default=None)
    a = ap.parse_args()
    k, studies, lags, spans, perms, subset = 300, 100, "0..95:5", "7..70:7", 1000, 10
    if a.quick:
        k, studies, lags, spans, perms, subset = 60, 20, "0..10:5", "7..28:7", 50, 3
    with tempfile.TemporaryDirectory(prefix="envlink-bench-scan-") as tmp:
        folder = Path(tmp)
        table, grid = _write(folder, k, studies)
        cmd = [sys.executable, "-m", "envlink", "scan", str(table), "--grid", str(grid), "--var",
               "sst", "--effect", "y", "--variance", "v", "--lags", lags, "--spans", spans,
               "--unit", "D", "--nested", "study", "--permutations", str(perms), "--seed", "1",
               "--json", str(folder / "scan.json"), "--force", "--no-cache"]
        warm = [*cmd[:cmd.index("--lags")], "--lags", "0", "--spans", "7", "--unit", "D",
                "--nested", "study", "--permutations", "9"]
        subprocess.run(warm, check=True, env=_env(), capture_output=True)  # compile / cache
        whole = []
        for _ in range(a.repeats):
            t = time.perf_counter()
            subprocess.run(cmd, check=True, env=_env(), capture_output=True)
            whole.append(time.perf_counter() - t)
        out = subprocess.run([sys.executable, "-c", PARTS, str(table), str(grid), lags, spans,
                              str(perms), str(subset)], check=True, env=_env(),
                             capture_output=True, text=True)
        parts = json.loads(out.stdout.strip().splitlines()[-1])
    n_fits = parts["windows"] * (perms + 1)
    loop_s = parts["single_fit_ms"] / 1000 * n_fits
    res = {"k": k, "studies": studies, "windows": parts["windows"], "permutations": perms,
           "whole_process_s": [statistics.median(whole), min(whole), max(whole)],
           **parts, "loop_projected_s": loop_s, "loop_over_model": loop_s / parts["model_s"]}
    print(f"scan of {parts['windows']} windows x {perms} permutations, k = {k} from {studies} "
          f"studies, nested, daily grid:")
    print(f"  (a) whole envlink scan process: {res['whole_process_s'][0]:.1f} s "
          f"({res['whole_process_s'][1]:.1f}-{res['whole_process_s'][2]:.1f})")
    print(f"  (b) extraction {parts['extraction_s']:.1f} s (one read of each cell, every window from it), model part "
          f"{parts['model_s']:.1f} s")
    print(f"  (c) single-fit loop: {parts['single_fit_ms']:.1f} ms per fit x {n_fits} fits = "
          f"{loop_s:.0f} s projected; {res['loop_over_model']:.0f}x the model part")
    if a.json:
        a.json.write_text(json.dumps(res, indent=2))


if __name__ == "__main__":
    main()
