"""Benchmark of envlink.attach against bare NumPy, a per-site .sel loop and a streaming limit.

Run from the repository root::

    python tests/benchmarks/bench_attach.py --quick     # tiny grid, seconds
    python tests/benchmarks/bench_attach.py --full      # 720 x 1440 x 360 float32, ~1.5 GB per layout

The grid is a 30-year monthly 0.25° global field (synthetic SST with a seasonal cycle,
a trend, Gaussian noise of 0.3 °C so that it compresses like real data rather than like
a smooth formula, and invented continents masked as NaN), written to a temporary folder in two
layouts: chunked (12, 90, 180) with zlib level 1, and contiguous uncompressed. The
table holds ocean-ish sites (|lat| <= 35°, about 5 % of them on land cells next to
the coast) with windows of 1-36 whole months. Timed, per layout:

(a) envlink: ``open_grid`` with its default chunks (which follow the file's storage) +
    ``attach(spatial="nearest-valid:25km", stat="mean")`` with all its QA flags and
    provenance, in a fresh subprocess (peak memory from the process's own high-water
    mark, VmHWM, so the driver's memory is not counted);
(b) bare NumPy as a skilled user writes it: read the needed latitude band into
    memory, fancy-index the nearest cells (float64), window means from cumulative
    sums; no QA;
(c) the per-site ``.sel(...).sel(time=slice(...)).mean()`` loop on the first rows,
    scaled per row;
(d) a streaming limit: the file in one-year time slabs (band rows only), needed cells
    gathered with NumPy, in as many processes as cores, then window means.

With ``--process``, only (e): whole processes from the command line, CSV to CSV, on
the compressed file: ``envlink attach --spatial nearest-valid:50km --stat mean`` with a
cold cell-series store against (d) as a whole process that also reads and writes the
CSV, alternating, with the peak memory (VmHWM) of every process of each summed.

Medians of the repeats with min-max are printed as JSON.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

CHUNKS = (12, 90, 180)


# -- data ----------------------------------------------------------------------------
def land_mask(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Invented continents: low-frequency blobs covering about a third of the globe."""
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    f = np.sin(2.0 * lo + 0.5) * np.cos(3.0 * la) + 0.6 * np.sin(5.0 * lo) * np.sin(4.0 * la + 1.0)
    return f > 0.45


def write_grids(folder: Path, ny: int, nx: int, nt: int, layouts: tuple[str, ...] = ("compressed", "contiguous"),
                start: str = "1990-01-01") -> dict[str, Path]:
    """Write the synthetic grid in the given layouts (monthly from ``start``); returns layout -> path."""
    import netCDF4

    lat = -90.0 + (np.arange(ny) + 0.5) * (180.0 / ny)
    lon = -180.0 + (np.arange(nx) + 0.5) * (360.0 / nx)
    land = land_mask(lat, lon)
    base = (28.0 - 20.0 * np.sin(np.radians(lat)) ** 2)[:, None] + 0.5 * np.cos(np.radians(lon))[None, :]
    paths = {"compressed": folder / "sst_zlib1.nc", "contiguous": folder / "sst_contiguous.nc"}
    paths = {k: v for k, v in paths.items() if k in layouts}
    for layout, path in paths.items():
        rng = np.random.default_rng(7)  # the same values in both layouts
        with netCDF4.Dataset(path, "w") as ds:
            ds.createDimension("time", nt)
            ds.createDimension("lat", ny)
            ds.createDimension("lon", nx)
            t = ds.createVariable("time", "f8", ("time",))
            t.units, t.calendar = f"days since {start}", "standard"
            months = pd.date_range(start, periods=nt + 1, freq="MS")
            t[:] = (months[:-1] - months[0]).days.to_numpy()
            ds.createVariable("lat", "f8", ("lat",))[:] = lat
            ds["lat"].units = "degrees_north"
            ds.createVariable("lon", "f8", ("lon",))[:] = lon
            ds["lon"].units = "degrees_east"
            kw = ({"zlib": True, "complevel": 1, "chunksizes": tuple(min(c, s) for c, s in zip(CHUNKS, (nt, ny, nx), strict=True))}
                  if layout == "compressed" else {"contiguous": True})
            v = ds.createVariable("sst", "f4", ("time", "lat", "lon"), fill_value=np.float32(-999.0), **kw)
            v.units = "degC"
            for y0 in range(0, nt, 12):
                k = np.arange(y0, min(y0 + 12, nt))
                season = 2.0 * np.sin(2 * np.pi * (k % 12) / 12.0)[:, None, None] * np.sign(lat)[None, :, None]
                noise = rng.standard_normal((k.size, ny, nx), dtype=np.float32) * np.float32(0.3)
                slab = (base[None] + season + 0.002 * k[:, None, None] + noise).astype(np.float32)
                slab[:, land] = np.nan
                v[k[0] : k[-1] + 1] = np.ma.masked_invalid(slab)
    return paths


def make_rows(n: int, ny: int, nx: int, nt: int, seed: int = 1, origin: str = "1990-01-01") -> pd.DataFrame:
    """Ocean-ish sites (|lat| <= 35) with 1-36 month windows; ~5 % on coastal land cells."""
    rng = np.random.default_rng(seed)
    lat_c = -90.0 + (np.arange(ny) + 0.5) * (180.0 / ny)
    lon_c = -180.0 + (np.arange(nx) + 0.5) * (360.0 / nx)
    land = land_mask(lat_c, lon_c)
    coast = land & ~(np.roll(land, 1, 0) & np.roll(land, -1, 0) & np.roll(land, 1, 1) & np.roll(land, -1, 1))
    lat, lon = [], []
    while len(lat) < n:
        a, b = rng.uniform(-35, 35, 4 * n), rng.uniform(-180, 180, 4 * n)
        iy = np.clip(((a + 90) / (180.0 / ny)).astype(int), 0, ny - 1)
        ix = np.clip(((b + 180) / (360.0 / nx)).astype(int), 0, nx - 1)
        ok = ~land[iy, ix] | coast[iy, ix]
        lat.extend(a[ok].tolist())
        lon.extend(b[ok].tolist())
    length = rng.integers(1, min(36, nt) + 1, n)
    start = rng.integers(0, nt - length + 1)
    months = pd.date_range(origin, periods=nt + 1, freq="MS")
    return pd.DataFrame({
        "site_lat": np.asarray(lat[:n]), "site_lon": np.asarray(lon[:n]),
        "period_start": months[start].strftime("%Y-%m-%d"),
        "period_end": (months[start + length] - pd.Timedelta(days=1)).strftime("%Y-%m-%d"),
        "locate_status": "ok",
        "_m0": start, "_m1": start + length,
    })


# -- (a) envlink in a subprocess -----------------------------------------------------
def _vm_hwm_mib() -> float:
    """This process's own peak resident memory (Linux VmHWM). ``ru_maxrss`` of a child
    can report the forking parent's peak, which is the benchmark driver's, not envlink's."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return float(line.split()[1]) / 1024.0  # kB -> MiB
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

def run_envlink(path: str, rows: str) -> dict[str, float]:
    """Time open_grid + attach; called in a fresh interpreter."""
    import envlink  # noqa: F401 - imports before the clock starts
    from envlink.extract.attach import attach
    from envlink.grids.open import open_grid

    table = pd.read_parquet(rows).drop(columns=["_m0", "_m1"])
    t0 = time.perf_counter()
    grid = open_grid(path, "sst")  # default chunks follow the file's storage
    t1 = time.perf_counter()
    out = attach(table, grid, name="sst", spatial="nearest-valid:25km", stat="mean", progress=False)
    wall = time.perf_counter() - t0
    attach_s = time.perf_counter() - t1
    peak = _vm_hwm_mib()
    child = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0  # largest reader process
    flags = out["sst_flags"].str.len().gt(0).sum()
    return {"seconds": wall, "attach_s": attach_s, "peak_mib": peak, "child_peak_mib": child,
            "values": int(out["sst"].notna().sum()), "flagged": int(flags)}


def time_a(path: Path, rows: Path) -> dict[str, float]:
    cmd = [sys.executable, __file__, "--run-envlink", str(path), str(rows)]
    res = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


# -- (b) bare NumPy ------------------------------------------------------------------
def _cells(ds, table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    lat = np.asarray(ds["lat"][:], dtype=np.float64)
    lon = np.asarray(ds["lon"][:], dtype=np.float64)
    dy, dx = lat[1] - lat[0], lon[1] - lon[0]
    iy = np.clip(np.floor((table.site_lat.to_numpy() - (lat[0] - dy / 2)) / dy).astype(int), 0, lat.size - 1)
    ix = np.clip(np.floor((table.site_lon.to_numpy() - (lon[0] - dx / 2)) / dx).astype(int), 0, lon.size - 1)
    return iy, ix


def _window_means(series: np.ndarray, m0: np.ndarray, m1: np.ndarray) -> np.ndarray:
    cum = np.zeros((series.shape[0] + 1, series.shape[1]))
    np.cumsum(series, axis=0, out=cum[1:])
    col = np.arange(series.shape[1])
    return (cum[m1, col] - cum[m0, col]) / (m1 - m0)


def time_b(path: Path, table: pd.DataFrame) -> float:
    import netCDF4

    t0 = time.perf_counter()
    with netCDF4.Dataset(path) as ds:
        iy, ix = _cells(ds, table)
        j0, j1 = int(iy.min()), int(iy.max()) + 1
        v = ds["sst"]
        v.set_auto_mask(False)
        band = v[:, j0:j1, :]
    band = np.where(band == np.float32(-999.0), np.float32(np.nan), band)
    series = band[:, iy - j0, ix].astype(np.float64)
    _window_means(series, table._m0.to_numpy(), table._m1.to_numpy())
    return time.perf_counter() - t0


# -- (c) per-site .sel loop ----------------------------------------------------------
def time_c(path: Path, table: pd.DataFrame, n: int) -> float:
    import xarray as xr

    sub = table.iloc[:n]
    t0 = time.perf_counter()
    da = xr.open_dataarray(path)
    for r in sub.itertuples():
        da.sel(lat=r.site_lat, lon=r.site_lon, method="nearest").sel(
            time=slice(r.period_start, r.period_end)
        ).mean().item()
    da.close()
    return (time.perf_counter() - t0) / n


# -- (d) streaming limit -------------------------------------------------------------
def _slab(args: tuple[str, int, int, int, int, np.ndarray, np.ndarray]) -> tuple[int, np.ndarray]:
    import netCDF4

    path, t0, t1, j0, j1, iy, ix = args
    with netCDF4.Dataset(path) as ds:
        v = ds["sst"]
        v.set_auto_mask(False)
        slab = v[t0:t1, j0:j1, :]
    return t0, slab[:, iy - j0, ix]


def time_d(path: Path, table: pd.DataFrame, workers: int) -> float:
    import netCDF4

    t0 = time.perf_counter()
    with netCDF4.Dataset(path) as ds:
        iy, ix = _cells(ds, table)
        nt = ds.dimensions["time"].size
    flat = np.unique(iy * 100_000 + ix)
    uy, ux = flat // 100_000, flat % 100_000
    j0, j1 = int(uy.min()), int(uy.max()) + 1
    out = np.empty((nt, flat.size), dtype=np.float32)
    jobs = [(str(path), s, min(s + 12, nt), j0, j1, uy, ux) for s in range(0, nt, 12)]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        for s, vals in pool.map(_slab, jobs):
            out[s : s + vals.shape[0]] = vals
    out = np.where(out == np.float32(-999.0), np.float32(np.nan), out)
    col = np.searchsorted(flat, iy * 100_000 + ix)
    _window_means(out[:, col].astype(np.float64), table._m0.to_numpy(), table._m1.to_numpy())
    return time.perf_counter() - t0


# -- (e) whole processes: envlink attach CSV -> CSV against a streaming reference ----
def write_located_csv(table: pd.DataFrame, path: Path) -> None:
    """The rows as 'envlink sites' writes them (text cells), without the month indices."""
    out = pd.DataFrame({
        "id": np.arange(len(table)), "site_lat": table.site_lat.round(6), "site_lon": table.site_lon.round(6),
        "site_precision_km": 0.111, "period_start": table.period_start, "period_end": table.period_end,
        "period_precision": "day", "locate_status": "ok", "locate_flags": "",
    })
    out.to_csv(path, index=False)


def run_reference(grid: str, rows_csv: str, out_csv: str, workers: int) -> None:
    """The streaming limit (d) as a whole process: read the CSV, nearest cells by index
    arithmetic, the file in yearly slabs (band rows only) in ``workers`` processes, window
    means from cumulative sums, the CSV written with the value column added."""
    import netCDF4

    table = pd.read_csv(rows_csv, keep_default_na=False, na_values=[""])
    with netCDF4.Dataset(grid) as ds:
        iy, ix = _cells(ds, table)
        nt = ds.dimensions["time"].size
        t0 = pd.Timestamp(str(netCDF4.num2date(ds["time"][0], ds["time"].units)))
    start = pd.to_datetime(table.period_start)
    end = pd.to_datetime(table.period_end) + pd.Timedelta(days=1)
    m0 = ((start.dt.year - t0.year) * 12 + start.dt.month - t0.month).to_numpy()
    m1 = ((end.dt.year - t0.year) * 12 + end.dt.month - t0.month).to_numpy()
    flat = np.unique(iy * 100_000 + ix)
    uy, ux = flat // 100_000, flat % 100_000
    j0, j1 = int(uy.min()), int(uy.max()) + 1
    series = np.empty((nt, flat.size), dtype=np.float32)
    jobs = [(str(grid), s, min(s + 12, nt), j0, j1, uy, ux) for s in range(0, nt, 12)]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        for s, vals in pool.map(_slab, jobs):
            series[s : s + vals.shape[0]] = vals
    series = np.where(series == np.float32(-999.0), np.float32(np.nan), series)
    col = np.searchsorted(flat, iy * 100_000 + ix)
    table["sst"] = _window_means(series[:, col].astype(np.float64), m0, m1)
    table.to_csv(out_csv, index=False)


def process_benchmark(folder: Path, grid: Path, rows_csv: Path, reps: int, spatial: str, workers: int
                      ) -> dict[str, object]:
    """(e): ``envlink attach`` (cold store) and the reference process, alternating, ``reps`` times each."""
    from _process import launcher, run_measured, summary

    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    runs: dict[str, list[dict[str, object]]] = {"envlink": [], "reference": []}
    for r in range(reps):
        cache = tempfile.mkdtemp(dir=folder, prefix="cache-")  # a cold store every run
        envlink_cmd = launcher(["-m", "envlink", "attach", str(rows_csv), "--grid", str(grid), "--name", "sst",
                                "--spatial", spatial, "--stat", "mean", "-o", str(folder / "out_envlink.csv"),
                                "--force", "--no-progress"])
        ref_cmd = launcher([__file__, "--run-reference", str(grid), str(rows_csv), str(folder / "out_ref.csv"),
                            str(workers)])
        order = [("envlink", envlink_cmd), ("reference", ref_cmd)]
        for name, cmd in order if r % 2 == 0 else order[::-1]:
            runs[name].append(run_measured(cmd, env={**env, "ENVLINK_CACHE": cache}))
    env_s = summary([float(x["seconds"]) for x in runs["envlink"]])  # type: ignore[arg-type]
    ref_s = summary([float(x["seconds"]) for x in runs["reference"]])  # type: ignore[arg-type]
    got = pd.read_csv(folder / "out_envlink.csv", usecols=["sst"])["sst"].to_numpy()
    ref = pd.read_csv(folder / "out_ref.csv", usecols=["sst"])["sst"].to_numpy()
    both = np.isfinite(got) & np.isfinite(ref)
    return {
        "envlink_s": env_s, "reference_s": ref_s, "ratio": env_s["median"] / ref_s["median"],
        "ratios": [float(a["seconds"]) / float(b["seconds"])  # type: ignore[arg-type]
                   for a, b in zip(runs["envlink"], runs["reference"], strict=True)],
        "envlink_peak_mib": max(float(x["peak_mib"]) for x in runs["envlink"]),  # type: ignore[arg-type]
        "envlink_processes": runs["envlink"][0]["peak_by_process_mib"],
        "reference_peak_mib": max(float(x["peak_mib"]) for x in runs["reference"]),  # type: ignore[arg-type]
        "reference_processes": runs["reference"][0]["peak_by_process_mib"],
        "rows_with_value": [int(np.isfinite(got).sum()), int(np.isfinite(ref).sum())],
        "median_abs_difference": float(np.median(np.abs(got[both] - ref[both]))) if both.any() else None,
        "envlink_stderr": str(runs["envlink"][-1]["stderr"])[-600:],
    }


# -- driver --------------------------------------------------------------------------
def _summ(xs: list[float]) -> dict[str, float]:
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "n": len(xs)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    size = p.add_mutually_exclusive_group()
    size.add_argument("--quick", action="store_true", help="tiny grid (default)")
    size.add_argument("--full", action="store_true", help="720 x 1440 x 360 grid, 100,000 rows")
    p.add_argument("--size", nargs=4, type=int, metavar=("NY", "NX", "NT", "ROWS"), help="a custom size")
    p.add_argument("--repeats", type=int, default=None, help="repeats of (a), (b), (d) (default 3 full, 2 quick)")
    p.add_argument("--sel-rows", type=int, default=None, help="rows for (c) (default 1000 full, 50 quick)")
    p.add_argument("--workdir", help="folder for the grids (default: a temporary folder, removed)")
    p.add_argument("--process", action="store_true",
                   help="(e) only: whole 'envlink attach' processes, CSV to CSV, cold store, against the "
                        "streaming reference as a whole process (the compressed file)")
    p.add_argument("--spatial", default="nearest-valid:50km", help="(e): the spatial rule (default nearest-valid:50km)")
    p.add_argument("--run-envlink", nargs=2, metavar=("GRID", "ROWS"), help=argparse.SUPPRESS)
    p.add_argument("--run-reference", nargs=4, metavar=("GRID", "CSV", "OUT", "WORKERS"), help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.run_envlink:
        print(json.dumps(run_envlink(*args.run_envlink)))
        return 0
    if args.run_reference:
        run_reference(*args.run_reference[:3], int(args.run_reference[3]))
        return 0
    if args.size:
        (ny, nx, nt, n), reps, sel = args.size, 2, 200
    elif args.full:
        ny, nx, nt, n, reps, sel = 720, 1440, 360, 100_000, 3, 1000
    else:
        ny, nx, nt, n, reps, sel = 72, 144, 48, 2_000, 2, 50
    reps = args.repeats or reps
    sel = args.sel_rows or sel
    workers = os.cpu_count() or 1
    if args.process:
        return _process_main(args, ny, nx, nt, n, reps, workers)
    with tempfile.TemporaryDirectory(dir=args.workdir) as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        paths = write_grids(folder, ny, nx, nt)
        gen = time.perf_counter() - t0
        table = make_rows(n, ny, nx, nt)
        rows = folder / "rows.parquet"
        table.to_parquet(rows)
        report: dict[str, object] = {
            "grid": [nt, ny, nx], "rows": n, "repeats": reps, "sel_rows": sel, "workers_d": workers,
            "generate_s": gen, "sizes_mb": {k: v.stat().st_size / 1e6 for k, v in paths.items()},
        }
        for layout, path in paths.items():
            a = [time_a(path, rows) for _ in range(reps)]
            b = [time_b(path, table) for _ in range(reps)]
            d = [time_d(path, table, workers) for _ in range(reps)]
            c = time_c(path, table, sel)
            ta, tb, td = _summ([x["seconds"] for x in a]), _summ(b), _summ(d)
            report[layout] = {
                "a_envlink_s": ta, "a_attach_only_s": _summ([x["attach_s"] for x in a]),
                "a_peak_mib": max(x["peak_mib"] for x in a),
                "a_reader_process_peak_mib": max(x["child_peak_mib"] for x in a),
                "a_values": a[0]["values"], "a_flagged": a[0]["flagged"],
                "b_numpy_s": tb, "c_sel_per_row_s": c, "d_stream_s": td,
                "a_over_b": ta["median"] / tb["median"], "a_over_d": ta["median"] / td["median"],
                "c_over_a_per_row": c / (ta["median"] / n),
            }
            print(json.dumps({layout: report[layout]}), file=sys.stderr, flush=True)
    print(json.dumps(report, indent=2))
    return 0


def _process_main(args: argparse.Namespace, ny: int, nx: int, nt: int, n: int, reps: int, workers: int) -> int:
    with tempfile.TemporaryDirectory(dir=args.workdir) as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        grid = write_grids(folder, ny, nx, nt, layouts=("compressed",))["compressed"]
        gen = time.perf_counter() - t0
        rows_csv = folder / "rows.csv"
        write_located_csv(make_rows(n, ny, nx, nt), rows_csv)
        report = {"grid": [nt, ny, nx], "rows": n, "repeats": reps, "spatial": args.spatial,
                  "reference_workers": workers, "generate_s": gen, "file_mb": grid.stat().st_size / 1e6,
                  **process_benchmark(folder, grid, rows_csv, reps, args.spatial, workers)}
    print(json.dumps(report, indent=2))
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))  # _process.py beside this file
    sys.exit(main())
