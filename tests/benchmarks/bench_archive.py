"""Benchmark (a): a many-file daily archive, ``envlink attach --stat dhw-max`` against a bare loop.

Run from the repository root::

    python tests/benchmarks/bench_archive.py --quick            # 120 small files, seconds
    python tests/benchmarks/bench_archive.py                    # 365 and 1,096 files, 0.25° global
    python tests/benchmarks/bench_archive.py --files 1096 --repeats 5 --keep /tmp/arch

The archive is one netCDF-4 file per day, as daily sea-surface temperature products
ship: 0.25° global (720 × 1440), longitudes 0..360, int16 packed with scale_factor
0.01 (float32) and a ``_FillValue``, packed ``valid_min`` / ``valid_max``, zlib, a
time axis of length 1 stamped at noon, realistic SST (a latitude profile, a seasonal
cycle, a slow warm anomaly and daily noise of 0.3 °C so it compresses like real
data) with invented continents masked. The table holds 1,000 ocean sites (|lat| ≤
30°) with one-year windows that start at least 84 days after the first file.

Timed, as whole processes from the command line (CSV in, CSV out), alternating order:

(e) envlink: ``envlink attach SITES --grid 'DIR/*.nc' --name dhw --stat dhw-max
    --mmm 28 -o OUT --no-cache`` (cold: no result cache, no warm process);
(r) the reference written below (:data:`REFERENCE`): a bare netCDF4 loop over the
    files in 2 processes that reads each file's latitude band, gathers the sites'
    cells, and computes degree heating weeks from cumulative sums.

Both compute degree heating weeks as docs/extract.md defines them (HotSpot = SST −
MMM; only HotSpots ≥ 1 °C accumulate over the trailing 84 days, divided by 7, in
°C-weeks) and take the maximum over each row's window; the values must agree to
1e-4 °C-weeks (asserted). Medians with min–max are printed as JSON and Markdown.
"""

from __future__ import annotations

import argparse
import functools
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

FIRST_DAY = np.datetime64("2001-01-01")
SCALE = np.float32(0.01)
FILL = np.int16(-999)
MMM = 28.0


# -- data ----------------------------------------------------------------------------
def land_mask(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Invented continents: low-frequency blobs covering about a third of the globe."""
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    f = np.sin(2.0 * lo + 0.5) * np.cos(3.0 * la) + 0.6 * np.sin(5.0 * lo) * np.sin(4.0 * la + 1.0)
    return f > 0.45


def axes(ny: int, nx: int) -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre latitudes (ascending) and longitudes in 0..360, as the files store them."""
    lat = -90.0 + (np.arange(ny) + 0.5) * (180.0 / ny)
    lon = (np.arange(nx) + 0.5) * (360.0 / nx)
    return lat, lon


@functools.lru_cache(maxsize=2)
def _static(ny: int, nx: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The parts of the field that do not change from day to day."""
    lat, lon = axes(ny, nx)
    la, lo = np.radians(lat)[:, None], np.radians(lon)[None, :]
    base = -1.5 + 29.5 * np.cos(la) ** 2 + 0.6 * np.sin(3.0 * lo) * np.cos(2.0 * la)
    season = np.clip(np.abs(lat) / 25.0, 0.4, 2.0)[:, None] * np.sign(lat + 1e-9)[:, None]
    warm = np.exp(-(((lat[:, None] - 5.0) / 20.0) ** 2)) * (0.5 + 0.5 * np.cos(lo - 3.5))
    return base, season, warm, land_mask(lat, lon)


def sst_field(day: int, ny: int, nx: int, seed: int = 0) -> np.ndarray:
    """Day ``day``'s SST in °C (NaN on land): latitude profile, season, warm anomaly, noise."""
    base, season, warm, land = _static(ny, nx)
    sst = base + season * np.sin(2.0 * np.pi * (day - 80) / 365.25) + 0.9 * np.sin(2.0 * np.pi * day / 700.0) * warm
    sst = sst + np.random.default_rng(seed * 100_003 + day).standard_normal((ny, nx), dtype=np.float32) * 0.3
    sst[land] = np.nan
    return sst


def write_day(path: Path, day: int, ny: int, nx: int, chunks: tuple[int, int] | None = None) -> Path:
    """One daily file: int16 packed SST, zlib, a length-1 time axis stamped at noon."""
    import netCDF4

    lat, lon = axes(ny, nx)
    sst = sst_field(day, ny, nx)
    packed = np.where(np.isfinite(sst), np.round(np.nan_to_num(sst) / 0.01), FILL).astype(np.int16)
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("time", 1)
        nc.createDimension("lat", ny)
        nc.createDimension("lon", nx)
        t = nc.createVariable("time", "f4", ("time",))
        t.units, t.calendar, t.standard_name = "days since 1978-01-01 12:00:00", "standard", "time"
        t[:] = np.float32((FIRST_DAY - np.datetime64("1978-01-01")).astype(int) + day)
        y = nc.createVariable("lat", "f4", ("lat",))
        y.units, y.standard_name = "degrees_north", "latitude"
        y[:] = lat.astype(np.float32)
        x = nc.createVariable("lon", "f4", ("lon",))
        x.units, x.standard_name = "degrees_east", "longitude"
        x[:] = lon.astype(np.float32)
        kw = {"chunksizes": (1, *chunks)} if chunks else {}
        v = nc.createVariable("sst", "i2", ("time", "lat", "lon"), zlib=True, complevel=4,
                              fill_value=FILL, **kw)
        v.set_auto_maskandscale(False)
        v.units, v.long_name = "Celsius", "daily sea surface temperature"
        v.scale_factor, v.add_offset = SCALE, np.float32(0.0)
        v.valid_min, v.valid_max = np.int16(-300), np.int16(4500)
        v[0] = packed
    return path


def _write_batch(args: tuple[str, list[int], int, int]) -> None:
    folder, days, ny, nx = args
    for d in days:
        write_day(Path(folder) / f"sst_{(FIRST_DAY + d).astype(str).replace('-', '')}.nc", d, ny, nx)


def write_archive(folder: Path, n_files: int, ny: int = 720, nx: int = 1440, workers: int = 2) -> list[Path]:
    """Write ``n_files`` daily files into ``folder`` (in ``workers`` processes)."""
    folder.mkdir(parents=True, exist_ok=True)
    days = list(range(n_files))
    batches = [(str(folder), days[i::workers], ny, nx) for i in range(workers)]
    if workers > 1:
        with ProcessPoolExecutor(workers) as ex:
            list(ex.map(_write_batch, batches))
    else:
        _write_batch(batches[0])
    return sorted(folder.glob("sst_*.nc"))


def make_sites(n: int, n_files: int, ny: int, nx: int, window_days: int, seed: int = 1) -> pd.DataFrame:
    """Ocean sites (|lat| ≤ 30°) near cell centres, windows starting ≥ 84 days after the first file."""
    rng = np.random.default_rng(seed)
    lat, lon = axes(ny, nx)
    land = land_mask(lat, lon)
    ocean = np.argwhere(~land & (np.abs(lat)[:, None] <= 30.0))
    pick = ocean[rng.choice(len(ocean), n, replace=False)]
    dy, dx = 180.0 / ny, 360.0 / nx
    site_lat = lat[pick[:, 0]] + rng.uniform(-0.3, 0.3, n) * dy
    site_lon = (lon[pick[:, 1]] + rng.uniform(-0.3, 0.3, n) * dx + 180.0) % 360.0 - 180.0
    first = 84
    start = rng.integers(first, max(first + 1, n_files - window_days + 1), n)
    end = np.minimum(start + window_days - 1, n_files - 1)
    day = FIRST_DAY + np.arange(n_files)
    return pd.DataFrame({
        "site_id": np.arange(n), "site_lat": site_lat.round(6), "site_lon": site_lon.round(6),
        "period_start": day[start].astype(str), "period_end": day[end].astype(str),
    })


# -- the reference process -------------------------------------------------------------
REFERENCE = r'''
import csv, glob, sys
from concurrent.futures import ProcessPoolExecutor
import netCDF4, numpy as np

folder, sites_csv, out_csv, mmm = sys.argv[1], sys.argv[2], sys.argv[3], float(sys.argv[4])
files = sorted(glob.glob(folder + "/*.nc"))
rows = list(csv.DictReader(open(sites_csv)))
slat = np.array([float(r["site_lat"]) for r in rows])
slon = np.array([float(r["site_lon"]) for r in rows]) % 360.0
with netCDF4.Dataset(files[0]) as nc:
    lat, lon = nc["lat"][:].astype(float), nc["lon"][:].astype(float)
    t0 = netCDF4.num2date(nc["time"][0], nc["time"].units).strftime("%Y-%m-%d")
dy, dx = lat[1] - lat[0], lon[1] - lon[0]
iy = np.floor((slat - (lat[0] - dy / 2)) / dy).astype(int)
ix = np.floor((slon - (lon[0] - dx / 2)) / dx).astype(int) % lon.size
r0, r1 = iy.min(), iy.max() + 1

def read(chunk):  # each file's latitude band, the sites' cells gathered, CF-unpacked
    out = []
    for f in chunk:
        with netCDF4.Dataset(f) as nc:
            v = nc["sst"]
            v.set_auto_maskandscale(False)
            band = v[0, r0:r1, :][iy - r0, ix]
            val = band * float(v.scale_factor) + float(v.add_offset)
            out.append(np.where(band == v._FillValue, np.nan, val))
    return np.array(out)

with ProcessPoolExecutor(2) as ex:
    S = np.concatenate(list(ex.map(read, np.array_split(files, 16))))   # (days, sites)
hot = S - mmm
hot = np.where(hot >= 1.0 - 1e-5, hot, 0.0)   # HotSpots >= 1 degC (1e-5: 0.01-degC packing round-off)
cum = np.concatenate([np.zeros((1, S.shape[1])), np.cumsum(hot, axis=0)])
k = np.arange(S.shape[0])
dhw = (cum[k + 1] - cum[np.maximum(k + 1 - 84, 0)]) / 7.0   # trailing 84 days, degC-weeks
day0 = np.datetime64(t0)
a = np.array([np.datetime64(r["period_start"]) - day0 for r in rows]).astype(int)
b = np.array([np.datetime64(r["period_end"]) - day0 for r in rows]).astype(int)
with open(out_csv, "w", newline="") as fh:
    w = csv.writer(fh)
    w.writerow(["site_id", "dhw"])
    for j, r in enumerate(rows):
        w.writerow([r["site_id"], repr(float(dhw[a[j]:b[j] + 1, j].max()))])
'''


def run_reference(folder: Path, sites: Path, out: Path) -> float:
    """The reference as a whole process; returns its wall time."""
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", REFERENCE, str(folder), str(sites), str(out), str(MMM)], check=True)
    return time.perf_counter() - t0


def run_envlink(folder: Path, sites: Path, out: Path, cache: Path) -> float:
    """``envlink attach`` as a whole process; returns its wall time."""
    cmd = [sys.executable, "-m", "envlink", "attach", str(sites), "--grid", str(folder / "*.nc"),
           "--name", "dhw", "--stat", "dhw-max", "--mmm", str(MMM), "-o", str(out), "--force", "--no-cache"]
    env = {**os.environ, "ENVLINK_CACHE": str(cache)}
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def compare(envlink_csv: Path, reference_csv: Path) -> float:
    """Largest absolute difference in °C-weeks; asserts it is at most 1e-4."""
    a = pd.read_csv(envlink_csv).set_index("site_id")["dhw"]
    b = pd.read_csv(reference_csv).set_index("site_id")["dhw"].reindex(a.index)
    assert a.notna().all() and b.notna().all(), "a site got no value"
    diff = float(np.max(np.abs(a.to_numpy() - b.to_numpy())))
    assert diff <= 1e-4, f"envlink and the reference differ by {diff} degC-weeks"
    return diff


def _summ(xs: list[float]) -> dict[str, float]:
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs)}


def bench(folder: Path, n_files: int, sites: int, repeats: int, ny: int, nx: int) -> dict[str, object]:
    """Time envlink and the reference on the first ``n_files`` files of ``folder``."""
    work = Path(tempfile.mkdtemp(prefix=f"envlink-arch{n_files}-"))
    sub = work / "files"
    sub.mkdir()
    for p in sorted(folder.glob("sst_*.nc"))[:n_files]:
        (sub / p.name).symlink_to(p)
    window = 365 if n_files >= 84 + 365 else max(10, n_files - 84 - 20)
    table = make_sites(sites, n_files, ny, nx, window)
    csv_in = work / "sites.csv"
    table.to_csv(csv_in, index=False)
    times: dict[str, list[float]] = {"envlink": [], "reference": []}
    diff = 0.0
    for r in range(repeats):
        order = ("envlink", "reference") if r % 2 == 0 else ("reference", "envlink")
        for who in order:
            if who == "envlink":
                times[who].append(run_envlink(sub, csv_in, work / "e.csv", work / "cache"))
            else:
                times[who].append(run_reference(sub, csv_in, work / "r.csv"))
        diff = max(diff, compare(work / "e.csv", work / "r.csv"))
    e, ref = _summ(times["envlink"]), _summ(times["reference"])
    return {"files": n_files, "sites": sites, "window_days": window, "repeats": repeats,
            "envlink_s": e, "reference_s": ref, "ratio": e["median"] / ref["median"],
            "max_abs_diff_degC_weeks": diff}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--quick", action="store_true", help="120 files of 72 x 144, 200 sites")
    p.add_argument("--files", type=int, nargs="+", default=[365, 1096],
                   help="archive sizes to time (the first N files of the largest)")
    p.add_argument("--sites", type=int, default=1000)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--keep", metavar="DIR", help="write (or reuse) the files in DIR and keep them")
    args = p.parse_args(argv)
    ny, nx = (72, 144) if args.quick else (720, 1440)
    sizes = [120] if args.quick else sorted(args.files)
    sites = 200 if args.quick else args.sites
    folder = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="envlink-archive-"))
    t0 = time.perf_counter()
    have = sorted(folder.glob("sst_*.nc"))
    if len(have) < max(sizes):
        write_archive(folder, max(sizes), ny, nx)
    gen = time.perf_counter() - t0
    results = [bench(folder, n, sites, args.repeats, ny, nx) for n in sizes]
    print(json.dumps({"generation_s": gen, "grid": [ny, nx], "results": results}, indent=2))
    print("\n| files | envlink, median (min–max) | reference, median (min–max) | ratio | max diff (°C-weeks) |")
    print("|---|---|---|---|---|")
    for r in results:
        e, ref = r["envlink_s"], r["reference_s"]
        print(f"| {r['files']:,} | {e['median']:.2f} ({e['min']:.2f}–{e['max']:.2f}) s | "
              f"{ref['median']:.2f} ({ref['min']:.2f}–{ref['max']:.2f}) s | {r['ratio']:.2f} | "
              f"{r['max_abs_diff_degC_weeks']:.1e} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
