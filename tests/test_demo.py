"""The bundled invented demo end to end: the fit recovers the relation the generator planted.

References: the planted values are those the seeded generator drew the counts from
(``envlink.demo_grids.generate.PLANTED``, stated in ``demo_grids/README.md``), and the
generator's own window-mean SST anomalies (``vell_truth.json``), computed there with
plain NumPy on the unmasked field, independently of the extract stage. Outputs are
read back with ``frictionless.validate``, ``pyarrow`` and ``geopandas``.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from envlink.demo_grids import DEMO_FILES, data_path
from envlink.demo_grids.generate import PLANTED

from envlink.cli import main
from envlink.project import RunResult, run_demo
from envlink.tables import read_table


@pytest.fixture(scope="module")
def demo_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    """The cache folder (cell-series store) of this module's demo runs ($ENVLINK_CACHE, never the user's)."""
    with pytest.MonkeyPatch.context() as mp:
        cache = tmp_path_factory.mktemp("cache")
        mp.setenv("ENVLINK_CACHE", str(cache))
        yield cache


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory, demo_cache: Path) -> RunResult:
    return run_demo(tmp_path_factory.mktemp("demo") / "out", progress=False)


def test_fitted_slope_recovers_the_planted_relation(demo: RunResult) -> None:
    d = demo.fit.to_dict()
    rows = d["coefficients"]["table"]
    slope = next(c for c in rows if c["term"] == "sst_anom")
    b = PLANTED["slope_per_degC"]  # 0.9 per degC, planted by the generator
    assert slope["ci_low"] <= b <= slope["ci_high"], slope
    assert slope["ci_high"] - slope["ci_low"] < 0.5  # informative, not a vacuous interval
    intercept = next(c for c in rows if c["term"] == "intercept")
    assert intercept["ci_low"] <= PLANTED["intercept"] <= intercept["ci_high"]
    assert d["coefficients"]["test"] == "t" and d["model"]["effects_used"] == demo.fit_rows == 73


def test_report_from_the_command_line_alone(demo: RunResult, tmp_path: Path, capsys) -> None:
    # the demo's folder -> envlink report, figures and all: a site map, per covariate its QA
    # flags and distribution (3 x 2), and the bubble, forest, funnel and residual plots
    out, figs = tmp_path / "report.html", tmp_path / "figures"
    assert main(["report", str(demo.out), "-o", str(out), "--figures", str(figs),
                 "--label", "reef", "--forest-order", "precision"]) == 0
    page = out.read_text(encoding="utf-8")
    assert page.count("data:image/png;base64,") == 11 == (demo.out / "report.html").read_text(
        encoding="utf-8").count("data:image/png;base64,")
    assert "against sst_anom, the first numeric term of the model" in page
    assert "labelled by reef" in page and "3 covariate window(s)" in page
    assert len(list(figs.glob("*.png"))) == 4
    capsys.readouterr()


def test_every_input_row_and_column_in_order(demo: RunResult) -> None:
    studies = read_table(data_path("vell_studies.csv"), as_text=True)
    t = demo.table
    assert len(t) == len(studies) == 76
    assert list(t.columns[: studies.shape[1]]) == list(studies.columns)
    pd.testing.assert_frame_equal(t[list(studies.columns)].astype(str), studies.astype(str))
    for c in ("sst_anom", "dhw_max", "air_lag3m"):
        assert {c, f"{c}_flags", f"{c}_distance_km", f"{c}_coverage"} <= set(t.columns)
    assert demo.windows_tried == 3


def test_deliberately_bad_rows_are_rejected_or_flagged(demo: RunResult) -> None:
    t = demo.table.set_index("notes")
    assert t.loc["latitude impossible as printed", "locate_status"] == "rejected"
    assert t.loc["site not in any gazetteer; no coordinates", "locate_status"] == "rejected"
    assert t.loc["no sampling date reported", "locate_status"] != "ok"
    swapped = t.loc["latitude and longitude printed in swapped columns"]
    assert "swapped_lat_lon" in swapped["locate_flags"]
    assert not demo.table.loc[demo.table["locate_status"] == "rejected", "fit_included"].any()


def test_attached_anomaly_matches_the_generators_own(demo: RunResult) -> None:
    truth = json.loads(data_path("vell_truth.json").read_text())
    x = pd.Series([r["sst_anomaly"] for r in truth["rows"]], dtype=float)
    got = demo.table["sst_anom"].astype(float)
    both = x.notna() & got.notna()
    assert both.sum() == 73
    diff = (got[both] - x[both]).abs()
    # nearest-valid cells of coastal reefs differ from the generator's unmasked cell
    # by the cell noise only (SD 0.05 degC): the typical difference is tiny
    assert float(diff.median()) < 0.01
    assert np.corrcoef(got[both], x[both])[0, 1] > 0.98
    # land-masked reefs are moved to the nearest valid cell and say so
    assert demo.table["sst_anom_flags"].astype(str).str.contains("nearest_valid").any()


def test_outputs_written_and_read_back(demo: RunResult) -> None:
    frictionless = pytest.importorskip("frictionless")
    gpd = pytest.importorskip("geopandas")
    out = demo.out
    for name in ("vell_enriched.csv", "datapackage.json", "vell_enriched.parquet",
                 "vell_enriched.gpkg", "fit.json", "fit.txt", "report.html"):  # fmt: skip
        assert (out / name).is_file(), name
    report = frictionless.validate(str(out / "datapackage.json"))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])
    desc = json.loads((out / "datapackage.json").read_text())
    assert desc["envlink"]["covariates"]["sst_anom"]["baseline"] == "1991-2020"
    assert len(desc["envlink"]["project_sha256"]) == 64
    csv = pd.read_csv(out / "vell_enriched.csv", keep_default_na=False, na_values=[""])
    pq = pd.read_parquet(out / "vell_enriched.parquet")
    np.testing.assert_allclose(pq["sst_anom"].to_numpy(float), csv["sst_anom"].to_numpy(float),
                               rtol=1e-15, atol=0, equal_nan=True)  # fmt: skip
    g = gpd.read_file(out / "vell_enriched.gpkg", layer="vell_enriched")
    assert len(g) == 76 and set(g.geometry.dropna().geom_type) == {"Point"}  # every row, one type
    polygons = gpd.read_file(out / "vell_enriched.gpkg", layer="vell_enriched_regions")
    regions = demo.table["site_wkt"].fillna("").astype(str).str.startswith("POLYGON")
    assert len(polygons) == int(regions.sum()) > 0
    assert set(polygons["reef"]) <= {"Vell Mor Lagoon", "Tarrin Barrier", "Osk Shoals"}
    assert set(polygons.geometry.geom_type) == {"Polygon"}
    html = (out / "report.html").read_text()
    assert html.count("<img") >= 5 and "Vell Archipelago" in html
    # reefs share SST cells: counted in fit.json's diagnostics, fit.txt and the report
    shared = json.loads((out / "fit.json").read_text())["diagnostics"]["spatial"]["shared_cells"]
    assert [s["covariate"] for s in shared] == ["sst_anom"] and shared[0]["cells_shared"] > 0
    assert csv["sst_anom_flags"].str.contains("shared_grid_cell").sum() == shared[0]["rows_sharing"]
    assert "\nDiagnostics\n  Shared grid cells:" in (out / "fit.txt").read_text()
    assert "<h2>What was corrected, and how</h2>" in html and "shared grid cell" in html


def test_rerun_reads_the_cell_series_store(demo: RunResult, demo_cache: Path, capsys) -> None:
    # the store lives in the cache folder ($ENVLINK_CACHE: this module's own) ...
    assert any((demo_cache / "cells").iterdir())
    assert not (demo.out / ".cache").exists()  # ... never in the output folder
    code = main(["demo", "--out", str(demo.out), "--force", "--no-progress"])
    assert code == 0
    desc = json.loads((demo.out / "datapackage.json").read_text())
    assert {v["cells"] for v in desc["envlink"]["covariates"].values()} == {"store"}
    assert "sst_anom" in capsys.readouterr().err
    again = pd.read_csv(demo.out / "vell_enriched.csv")
    np.testing.assert_allclose(again["sst_anom"].to_numpy(float),
                               demo.table["sst_anom"].to_numpy(float), rtol=1e-12, equal_nan=True)
    assert main(["demo", "--out", str(demo.out), "--no-progress"]) == 2  # exists, no --force


def test_run_killed_mid_export_leaves_previous_output_intact(demo: RunResult) -> None:
    import hashlib
    import os
    import signal
    import subprocess
    import sys
    import time

    def digest() -> dict[str, str]:
        return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
                for p in sorted(demo.out.iterdir()) if p.is_file() and not p.name.startswith(".")}

    before = digest()
    assert len(before) == 7
    proc = subprocess.Popen([sys.executable, "-m", "envlink", "demo", "--out", str(demo.out),
                             "--force", "--no-progress"], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)  # fmt: skip
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if any(p.name.endswith(".part") for p in demo.out.iterdir()):
                break  # the export's temporary files exist: it is midway
            time.sleep(0.001)
        assert proc.poll() is None, "the run finished before it could be interrupted"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert digest() == before


def test_generator_is_reproducible_and_used_when_files_are_missing(tmp_path: Path,
                                                                  monkeypatch) -> None:
    import envlink.demo_grids as demo_grids

    from envlink.project.run import _demo_project_dir

    monkeypatch.setattr(demo_grids, "data_path", lambda name: tmp_path / "absent" / name)
    folder, tmp = _demo_project_dir()
    try:
        assert tmp is not None
        for name in DEMO_FILES:
            assert (folder / name).is_file(), name
        assert (folder / "vell_studies.csv").read_bytes() == data_path("vell_studies.csv").read_bytes()
        assert (folder / "demo.toml").read_text() == data_path("demo.toml").read_text()
        with xr.open_dataset(folder / "vell_sst_monthly.nc") as a, \
                xr.open_dataset(data_path("vell_sst_monthly.nc")) as b:
            xr.testing.assert_identical(a, b)
    finally:
        if tmp is not None:
            tmp.cleanup()


def test_demo_grids_are_small_and_say_they_are_invented() -> None:
    total = sum(data_path(n).stat().st_size for n in DEMO_FILES)
    assert total < 15 * 2**20
    for name in ("vell_sst_monthly.nc", "vell_sst_daily.nc", "vell_air_monthly.nc"):
        with xr.open_dataset(data_path(name)) as ds:
            assert "Invented" in ds.attrs["comment"] and "generate" in ds.attrs["source"]
    assert len(read_table(data_path("vell_studies.csv"))) >= 60


def test_generator_command_line_writes_every_file(tmp_path: Path, capsys) -> None:
    from envlink.demo_grids.generate import main as generate_main

    assert generate_main(["--out", str(tmp_path)]) == 0
    printed = capsys.readouterr().out.split()
    assert sorted(Path(p).name for p in printed) == sorted(DEMO_FILES)
    truth = json.loads((tmp_path / "vell_truth.json").read_text())
    assert truth["planted"] == PLANTED and truth["baseline"] == [1991, 2020]


_NO_PYARROW = """
import sys

class _Refuse:  # an import hook: pyarrow cannot be imported, as in a plain install
    def find_spec(self, name, path=None, target=None):
        if name == "pyarrow" or name.startswith("pyarrow."):
            raise ModuleNotFoundError(f"No module named {name!r}", name=name)
        return None

sys.meta_path.insert(0, _Refuse())
from envlink.cli import main
sys.exit(main(sys.argv[1:]))
"""


def test_demo_runs_without_pyarrow_and_says_parquet_was_left_out(tmp_path: Path, demo_cache: Path) -> None:
    import subprocess
    import sys

    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-c", _NO_PYARROW, "demo", "--out", str(out), "--no-progress"],
                          capture_output=True, text=True, timeout=600)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "note: the Parquet table was not written: it needs pyarrow" in proc.stderr
    written = sorted(p.name for p in out.iterdir())
    assert written == ["datapackage.json", "fit.json", "fit.txt", "report.html", "vell_enriched.csv",
                       "vell_enriched.gpkg"]  # fmt: skip
