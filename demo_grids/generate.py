"""Seeded generator of the invented Vell Archipelago demo data.

Writes three small CF-netCDF grids (packed int16, zlib-compressed), an invented
studies table, an invented gazetteer of reef names (GeoPackage and CSV, some reefs
as polygons), a truth file and the bundled project file ``demo.toml``::

    python -m envlink.demo_grids.generate --out DIR

The generator plants one relation in the studies table (the values are in
:data:`PLANTED` and in ``README.md``)::

    logit(prevalence) = A + B * sst_anomaly + u_study,   u_study ~ N(0, TAU_STUDY^2)

where ``sst_anomaly`` is the mean of the monthly SST over the row's sampling window
(months weighted by the days of the window they hold) minus the 1991-2020 mean of
the same calendar months, at the grid cell nearest the reef; the counts diseased
are then drawn as Binomial(examined, prevalence). Everything is invented.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from envlink.demo_grids.textforms import COORD_STYLES, PERIOD_STYLES, coord_cells, period_text

__all__ = ["generate", "PLANTED", "SEED", "BOX", "main"]

#: Seed of every random draw.
SEED = 20261201
#: The planted relation: intercept, slope per °C of SST anomaly, study SD (logit scale).
PLANTED = {"intercept": -2.0, "slope_per_degC": 0.9, "tau_study": 0.3}
#: lat_min, lat_max, lon_min, lon_max of the archipelago box (degrees).
BOX = (-12.0, -6.0, -120.0, -114.0)
BASELINE = (1991, 2020)
INVENTED = (
    "Invented data for the envlink demo (the fictional Vell Archipelago). "
    "Not observations of any real place; made by envlink.demo_grids.generate."
)

# Islands: name, centre lat, centre lon, semi-axis lat, semi-axis lon (degrees).
ISLANDS = [
    ("Vell Mor", -8.6, -117.4, 0.45, 0.30),
    ("Tarrin", -9.8, -116.1, 0.25, 0.20),
    ("Osk", -10.7, -118.3, 0.20, 0.30),
    ("Little Harl", -7.4, -115.5, 0.15, 0.15),
    ("Quenmarra", -9.2, -119.0, 0.20, 0.15),
]
REEF_NAMES = [
    "Amberlet Reef", "Brisk Shoal", "Corran Bank", "Dunmere Reef", "Elsk Point",
    "Farrow Knoll", "Gannet Wall", "Hollin Reef", "Iskel Patch", "Jorra Bank",
    "Kestle Reef", "Lorn Garden", "Marrow Cay Reef", "Nettle Shoal", "Orrin Wall",
    "Pell Bommie", "Quill Reef", "Rasken Bank", "Sorrel Patch", "Tamsin Reef",
]  # fmt: skip
# Regions (polygons): name, centre lat, centre lon, half-height, half-width (degrees).
REGIONS = [
    ("Vell Mor Lagoon", -8.05, -117.05, 0.12, 0.18),
    ("Tarrin Barrier", -10.15, -115.8, 0.10, 0.25),
    ("Osk Shoals", -11.1, -118.6, 0.15, 0.15),
]
METHODS = ["belt transect", "photo quadrat", "roving diver"]
# ---------------------------------------------------------------- the climate model
def _basin_anomaly(rng: np.random.Generator, n_months: int) -> np.ndarray:
    """Interannual SST swings shared by the archipelago: AR(1), SD about 0.6 °C."""
    phi, sd = 0.85, 0.6
    out = np.empty(n_months)
    out[0] = rng.normal(0.0, sd)
    for i in range(1, n_months):
        out[i] = phi * out[i - 1] + rng.normal(0.0, sd * np.sqrt(1 - phi**2))
    return out


def _sst_signal(frac_year: np.ndarray, anom: np.ndarray, lat: np.ndarray, lon: np.ndarray):
    """Smooth SST (°C) at times ``frac_year`` (years since 1990) and cells ``lat x lon``."""
    season = 1.4 * np.cos(2 * np.pi * (frac_year - 2.0 / 12.0))  # warmest in early March
    trend = 0.02 * (frac_year - 15.0)
    base = 28.0 + season + trend + anom
    lat_g, lon_g = np.meshgrid(lat, lon, indexing="ij")
    spatial = 0.12 * (lat_g + 9.0) + 0.05 * (lon_g + 117.0)  # warmer towards the equator
    pattern = 1.0 + 0.1 * (lon_g + 117.0) / 3.0  # swings slightly larger in the east
    return base[:, None, None] + spatial[None] + (pattern[None] - 1.0) * anom[:, None, None]


def _land_mask(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    lat_g, lon_g = np.meshgrid(lat, lon, indexing="ij")
    land = np.zeros(lat_g.shape, dtype=bool)
    for _, clat, clon, alat, alon in ISLANDS:
        land |= ((lat_g - clat) / alat) ** 2 + ((lon_g - clon) / alon) ** 2 <= 1.0
    return land


def _month_edges(first_year: int, last_year: int) -> pd.DatetimeIndex:
    return pd.date_range(f"{first_year}-01-01", f"{last_year + 1}-01-01", freq="MS")


def _packed(name: str, scale: float, offset: float) -> dict[str, dict[str, object]]:
    return {
        name: {
            "dtype": "int16", "scale_factor": scale, "add_offset": offset,
            "_FillValue": np.int16(-32768), "zlib": True, "complevel": 6, "shuffle": True,
        },
        "time": {"units": "days since 1990-01-01 00:00:00", "calendar": "standard",
                 "dtype": "float64"},
    }  # fmt: skip


def _write_grid(path: Path, da_values, *, name, lat, lon, edges, stamps, attrs, scale, offset,
                bounds=True, lat_descending=False, lon_360=False):
    import xarray as xr

    lat_out, values = lat, da_values
    if lat_descending:
        lat_out, values = lat[::-1], values[:, ::-1, :]
    lon_out = np.mod(lon, 360.0) if lon_360 else lon
    coords = {
        "time": ("time", stamps, {"standard_name": "time", "axis": "T"}),
        "lat": ("lat", lat_out, {"standard_name": "latitude", "units": "degrees_north",
                                 "axis": "Y"}),
        "lon": ("lon", lon_out, {"standard_name": "longitude", "units": "degrees_east",
                                 "axis": "X"}),
    }  # fmt: skip
    ds = xr.Dataset({name: (("time", "lat", "lon"), values.astype(np.float64), attrs)}, coords)
    encoding = _packed(name, scale, offset)
    if bounds:
        ds["time"].attrs["bounds"] = "time_bnds"
        ds["time_bnds"] = (("time", "nv"), np.stack([edges[:-1], edges[1:]], axis=1))
        encoding["time_bnds"] = {"units": "days since 1990-01-01 00:00:00",
                                 "calendar": "standard", "dtype": "float64"}
    ds.attrs = {
        "Conventions": "CF-1.8", "title": f"Vell Archipelago {attrs['long_name']} (invented)",
        "source": "envlink.demo_grids.generate (seeded synthetic field)",
        "comment": INVENTED, "institution": "none (invented data)",
    }  # fmt: skip
    ds.to_netcdf(path, encoding=encoding, format="NETCDF4")


# ---------------------------------------------------------------- grids
def _grids(out: Path, rng: np.random.Generator) -> dict[str, object]:
    lat_min, lat_max, lon_min, lon_max = BOX
    edges = _month_edges(1990, 2022)
    n = len(edges) - 1
    mids = edges[:-1] + (edges[1:] - edges[:-1]) / 2
    frac = (mids - pd.Timestamp("1990-01-01")).days.to_numpy() / 365.25
    anom = _basin_anomaly(rng, n)

    # monthly SST, 0.25 degree, islands masked as land, latitudes stored north to south
    lat = np.arange(lat_min + 0.125, lat_max, 0.25)
    lon = np.arange(lon_min + 0.125, lon_max, 0.25)
    sst = _sst_signal(frac, anom, lat, lon) + rng.normal(0.0, 0.05, (n, lat.size, lon.size))
    land = _land_mask(lat, lon)
    masked = np.where(land[None], np.nan, sst)
    _write_grid(
        out / "vell_sst_monthly.nc", masked, name="sst", lat=lat, lon=lon, edges=edges,
        stamps=mids, scale=0.001, offset=26.0, lat_descending=True,
        attrs={"standard_name": "sea_surface_temperature", "long_name": "monthly mean SST",
               "units": "degree_C", "cell_methods": "time: mean", "comment": INVENTED},
    )  # fmt: skip

    # daily SST, 0.5 degree, 1994-2022, for heat stress; big islands masked
    dlat = np.arange(lat_min + 0.25, lat_max, 0.5)
    dlon = np.arange(lon_min + 0.25, lon_max, 0.5)
    days = pd.date_range("1994-01-01", "2022-12-31", freq="D")
    dfrac = (days + pd.Timedelta(hours=12) - pd.Timestamp("1990-01-01")).days.to_numpy() / 365.25
    dfrac = dfrac + 0.5 / 365.25
    danom = np.interp(dfrac, frac, anom)
    daily_noise = np.empty(days.size)
    daily_noise[0] = 0.0
    for i in range(1, days.size):  # short-lived warm and cool spells, SD about 0.3 °C
        daily_noise[i] = 0.9 * daily_noise[i - 1] + rng.normal(0.0, 0.3 * np.sqrt(1 - 0.81))
    dsst = _sst_signal(dfrac, danom + daily_noise, dlat, dlon)
    dsst = dsst + rng.normal(0.0, 0.05, dsst.shape)
    dland = _land_mask(dlat, dlon)
    dsst = np.where(dland[None], np.nan, dsst)
    dedges = pd.date_range("1994-01-01", "2023-01-01", freq="D")
    _write_grid(
        out / "vell_sst_daily.nc", dsst, name="analysed_sst", lat=dlat, lon=dlon, edges=dedges,
        stamps=days + pd.Timedelta(hours=12), scale=0.01, offset=26.0, bounds=False,
        attrs={"standard_name": "sea_surface_temperature", "long_name": "daily mean SST",
               "units": "degree_C", "cell_methods": "time: mean", "comment": INVENTED},
    )  # fmt: skip

    # monthly air temperature, 0.5 degree, over land and sea, in kelvin, lon 0-360
    air = _sst_signal(frac, 0.8 * anom, dlat, dlon) - 0.6
    air = air + 1.2 * _land_mask(dlat, dlon)[None] + rng.normal(0.0, 0.15, air.shape)
    _write_grid(
        out / "vell_air_monthly.nc", air + 273.15, name="t2m", lat=dlat, lon=dlon,
        edges=edges, stamps=mids, scale=0.002, offset=300.0, lon_360=True,
        attrs={"standard_name": "air_temperature", "long_name": "monthly mean 2 m air temperature",
               "units": "K", "cell_methods": "time: mean", "comment": INVENTED},
    )  # fmt: skip
    clim_mask = (edges[:-1].year >= BASELINE[0]) & (edges[:-1].year <= BASELINE[1])
    clim = np.stack(
        [sst[clim_mask & (edges[:-1].month == m)].mean(axis=0) for m in range(1, 13)]
    )
    return {"lat": lat, "lon": lon, "edges": edges, "sst": sst, "clim": clim}


def _window_anomaly(grid: dict[str, object], lat0: float, lon0: float, start, end) -> float:
    """Duration-weighted window mean minus the same months' 1991-2020 mean, nearest cell."""
    lat, lon = grid["lat"], grid["lon"]
    i, j = int(np.argmin(np.abs(lat - lat0))), int(np.argmin(np.abs(lon - lon0)))
    edges = grid["edges"]
    lo = np.maximum(edges[:-1], pd.Timestamp(start))
    hi = np.minimum(edges[1:], pd.Timestamp(end) + pd.Timedelta(days=1))
    w = np.clip((hi - lo).days.to_numpy(), 0, None).astype(float)
    months = edges[:-1].month.to_numpy() - 1
    diff = grid["sst"][:, i, j] - grid["clim"][months, i, j]
    return float(np.sum(w * diff) / np.sum(w))


# ---------------------------------------------------------------- gazetteer
def _gazetteer(rng: np.random.Generator) -> pd.DataFrame:
    from shapely.geometry import Point, Polygon

    rows = []
    for k, name in enumerate(REEF_NAMES):
        _, clat, clon, alat, alon = ISLANDS[k % len(ISLANDS)]
        ang = rng.uniform(0, 2 * np.pi)
        r = rng.uniform(0.95, 1.6)  # some reefs sit on cells masked as land
        lat0, lon0 = clat + r * alat * np.sin(ang), clon + r * alon * np.cos(ang)
        alias = name.rsplit(" ", 1)[0]
        rows.append({"name": name, "aliases": alias, "kind": "point",
                     "latitude": round(lat0, 4), "longitude": round(lon0, 4),
                     "geometry": Point(round(lon0, 4), round(lat0, 4))})  # fmt: skip
    for name, clat, clon, hh, hw in REGIONS:
        ring = [(clon - hw, clat - hh), (clon + hw, clat - hh * 0.6), (clon + hw * 0.8, clat + hh),
                (clon - hw * 0.7, clat + hh * 0.9), (clon - hw, clat - hh)]  # fmt: skip
        poly = Polygon([(round(x, 4), round(y, 4)) for x, y in ring])
        c = poly.centroid
        rows.append({"name": name, "aliases": "", "kind": "region",
                     "latitude": round(c.y, 4), "longitude": round(c.x, 4), "geometry": poly})
    return pd.DataFrame(rows)


def _studies(rng: np.random.Generator, grid, gaz: pd.DataFrame):
    a, b, tau = PLANTED["intercept"], PLANTED["slope_per_degC"], PLANTED["tau_study"]
    rows, truth = [], []
    years = np.linspace(1995, 2020, len(COORD_STYLES)).round().astype(int)
    for s, (cstyle, pstyle) in enumerate(zip(COORD_STYLES, PERIOD_STYLES, strict=True)):
        study = f"S{s + 1:02d}"
        u = rng.normal(0.0, tau)
        method = METHODS[s % len(METHODS)]
        n_rows = int(rng.integers(4, 7))
        for _ in range(n_rows):
            g = gaz.iloc[int(rng.integers(0, len(gaz)))]
            year = int(years[s] + rng.integers(0, 3))
            text, start, end = period_text(pstyle, rng, year)
            style = "name" if g["kind"] == "region" else cstyle
            lat_t, lon_t, coords_t = coord_cells(style, g["latitude"], g["longitude"])
            x = _window_anomaly(grid, g["latitude"], g["longitude"], start, end)
            n = int(rng.integers(40, 260))
            p = 1.0 / (1.0 + np.exp(-(a + b * x + u)))
            k = int(rng.binomial(n, p))
            reef = g["name"] if style == "name" or rng.random() < 0.5 else ""
            if style == "name" and rng.random() < 0.3:
                reef = g["name"].replace("Reef", "reef")  # as written in the paper
            rows.append({"study_id": study, "source": f"Vell reef health survey report {study}",
                         "reef": reef, "latitude": lat_t, "longitude": lon_t,
                         "coordinates": coords_t, "sampling_period": text,
                         "depth_m": f"{rng.uniform(2, 18):.1f}", "method": method,
                         "examined": n, "diseased": k, "notes": ""})  # fmt: skip
            truth.append({"study_id": study, "site": g["name"], "start": f"{start:%Y-%m-%d}",
                          "end": f"{end:%Y-%m-%d}", "sst_anomaly": round(x, 5)})
    # deliberately bad rows: the locate stage rejects them
    bad = [
        {"latitude": "-95.30", "longitude": "-117.10", "sampling_period": "Mar-Apr 2005",
         "notes": "latitude impossible as printed"},
        {"reef": "Sandbar by the old jetty", "sampling_period": "June 2010",
         "notes": "site not in any gazetteer; no coordinates"},
        {"reef": "Corran Bank", "sampling_period": "not reported",
         "notes": "no sampling date reported"},
    ]  # fmt: skip
    for i, extra in enumerate(bad):
        n = int(rng.integers(40, 200))
        row = {"study_id": "S15", "source": "Vell reef health survey report S15", "reef": "",
               "latitude": "", "longitude": "", "coordinates": "", "depth_m": "6.0",
               "method": METHODS[i % 3], "examined": n, "diseased": int(rng.binomial(n, 0.12)),
               "notes": ""}  # fmt: skip
        row.update(extra)
        rows.append(row)
        truth.append({"study_id": "S15", "site": "", "start": "", "end": "", "sst_anomaly": None})
    # a row with latitude and longitude printed in swapped columns: located (flagged)
    start, end = pd.Timestamp("2014-08-01"), pd.Timestamp("2014-09-30")
    x = _window_anomaly(grid, -9.4512, -117.2034, start, end)
    n = 120
    k = int(rng.binomial(n, 1.0 / (1.0 + np.exp(-(a + b * x)))))
    rows.append({"study_id": "S15", "source": "Vell reef health survey report S15", "reef": "",
                 "latitude": "-117.2034", "longitude": "-9.4512", "coordinates": "",
                 "sampling_period": "Aug-Sep 2014", "depth_m": "7.5", "method": METHODS[0],
                 "examined": n, "diseased": k,
                 "notes": "latitude and longitude printed in swapped columns"})  # fmt: skip
    truth.append({"study_id": "S15", "site": "", "start": f"{start:%Y-%m-%d}",
                  "end": f"{end:%Y-%m-%d}", "sst_anomaly": round(x, 5)})
    return pd.DataFrame(rows), truth


# ---------------------------------------------------------------- the project file
DEMO_TOML = """\
# envlink project file of the invented Vell Archipelago demo.
# Every key is described in docs/project-file.md; relative paths are relative to this file.
# The data are invented (see README.md beside this file).

[project]
title = "Lesion prevalence and sea warmth in the Vell Archipelago (invented demo)"
out = "envlink-demo"

[studies]
path = "vell_studies.csv"
study = "study_id"

[locate]
lat = "latitude"
lon = "longitude"
coords = "coordinates"
site = "reef"
gazetteer = "vell_reefs.gpkg"
period = "sampling_period"

[grids.sst_monthly]
path = "vell_sst_monthly.nc"
variable = "sst"

[grids.sst_daily]
path = "vell_sst_daily.nc"
variable = "analysed_sst"

[grids.air_monthly]
path = "vell_air_monthly.nc"
variable = "t2m"

# The planted moderator: window-mean SST anomaly against the 1991-2020 months.
[[covariates]]
name = "sst_anom"
grid = "sst_monthly"
stat = "anomaly"
window = "period"
spatial = "nearest-valid:40km"
baseline = "1991-2020"

[[covariates]]
name = "dhw_max"
grid = "sst_daily"
stat = "dhw-max"
window = "period"
spatial = "nearest-valid:60km"
baseline = "1994-2020"

[[covariates]]
name = "air_lag3m"
grid = "air_monthly"
stat = "mean"
window = "lag:3M"
spatial = "nearest"

[effects]
kind = "logit_proportion"
name = "effect"
variance = "variance"

[effects.columns]
events = "diseased"
total = "examined"

[model]
moderators = "sst_anom"
method = "REML"
test = "knapp-hartung"
nested = "study_id"

[export]
name = "vell_enriched"
formats = ["csv", "parquet", "gpkg"]
report = true
"""


# ---------------------------------------------------------------- entry points
def generate(out: str | Path, *, seed: int = SEED) -> dict[str, Path]:
    """Write every demo file into ``out`` and return their paths by file name.

    Parameters
    ----------
    out : path-like
        Folder to write into (created if needed). Existing demo files there are replaced.
    seed : int
        Seed of every random draw; the bundled files use :data:`SEED`.

    Returns
    -------
    dict of str to pathlib.Path

    Examples
    --------
    >>> import tempfile
    >>> paths = generate(tempfile.mkdtemp())  # doctest: +SKIP
    >>> sorted(paths)[:2]  # doctest: +SKIP
    ['demo.toml', 'vell_air_monthly.nc']
    """
    import geopandas as gpd

    out_dir = Path(out)
    out_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    grid = _grids(out_dir, rng)
    gaz = _gazetteer(rng)
    studies, truth = _studies(rng, grid, gaz)
    studies.to_csv(out_dir / "vell_studies.csv", index=False)
    gpd.GeoDataFrame(gaz, geometry="geometry", crs="EPSG:4326").to_file(
        out_dir / "vell_reefs.gpkg", driver="GPKG", layer="reefs"
    )
    flat = gaz.assign(wkt=gaz["geometry"].map(lambda g: g.wkt)).drop(columns="geometry")
    flat.to_csv(out_dir / "vell_reefs.csv", index=False)
    (out_dir / "vell_truth.json").write_text(
        json.dumps({"comment": INVENTED, "seed": seed, "planted": PLANTED,
                    "baseline": list(BASELINE), "rows": truth}, indent=1) + "\n"
    )  # fmt: skip
    (out_dir / "demo.toml").write_text(DEMO_TOML)
    names = ["vell_sst_monthly.nc", "vell_sst_daily.nc", "vell_air_monthly.nc",
             "vell_studies.csv", "vell_reefs.gpkg", "vell_reefs.csv", "vell_truth.json",
             "demo.toml"]  # fmt: skip
    return {name: out_dir / name for name in names}


def main(argv: Sequence[str] | None = None) -> int:
    """Command-line entry point: ``python -m envlink.demo_grids.generate --out DIR``."""
    parser = argparse.ArgumentParser(
        prog="python -m envlink.demo_grids.generate",
        description="Write the invented Vell Archipelago demo data (seeded, reproducible).",
    )
    parser.add_argument("--out", required=True, help="folder to write the files into")
    parser.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED})")
    args = parser.parse_args(argv)
    for path in generate(args.out, seed=args.seed).values():
        print(path)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
