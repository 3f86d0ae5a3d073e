"""Export: CSV + Frictionless Data Package, Parquet and GeoPackage read back equal; atomic sets.

References: the Frictionless Table Schema / Data Package specifications
(https://specs.frictionlessdata.io/), checked with the ``frictionless`` library's
``validate``; Apache Parquet read back with ``pyarrow.parquet``; OGC GeoPackage read
back with ``geopandas.read_file`` (pyogrio / GDAL).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from envlink import InputError, MetaRegression
from envlink.export import export_table, file_sha256

POLY = "POLYGON ((-117.2 -8.1, -116.9 -8.1, -116.9 -7.9, -117.2 -7.9, -117.2 -8.1))"


def _enriched(n: int = 6) -> pd.DataFrame:
    """A table shaped like the pipeline's output: text inputs, then added columns."""
    rng = np.random.default_rng(3)
    lat = rng.uniform(-11, -7, n)
    lat[2] = np.nan
    t = pd.DataFrame({
        "study_id": [f"S{i // 2:02d}" for i in range(n)],
        "reef": ["Pell Bommie", "", "Sandbar", "Vell Mor Lagoon", "Quill Reef", "Orrin Wall"][:n]
        if n <= 6 else [f"reef {i}" for i in range(n)],
        "notes": ["NA", "", "n/a", "said \"deep\", cold", "ü", "1,5"][:n] if n <= 6 else [""] * n,
        "examined": [str(40 + i) for i in range(n)],
        "site_lat": lat,
        "site_lon": rng.uniform(-119, -115, n),
        "site_wkt": [POLY if i == 3 else None for i in range(n)],
        "period_start": ["2001-03-01"] * n,
        "period_end": [None if i == 2 else "2001-04-30" for i in range(n)],
        "locate_status": ["rejected" if i == 2 else "ok" for i in range(n)],
        "locate_flags": ["site_not_found" if i == 2 else "" for i in range(n)],
        "sst_anom": rng.normal(0, 0.5, n),
        "sst_anom_flags": [""] * n,
        "sst_anom_distance_km": rng.uniform(0, 20, n),
        "effect": rng.normal(-2, 0.3, n),
        "variance": rng.uniform(0.02, 0.2, n),
        "fit_included": [i != 2 for i in range(n)],
    })  # fmt: skip
    t.loc[2, ["sst_anom", "effect"]] = np.nan
    return t


PROV = {"covariates": {"sst_anom": {"grid": "sst_monthly", "stat": "anomaly", "window": "period",
                                    "spatial": "nearest-valid:40km", "units": "degC"}}}


def _read_csv_typed(path: Path, descriptor: dict) -> pd.DataFrame:
    fields = descriptor["resources"][0]["schema"]["fields"]
    df = pd.read_csv(path, keep_default_na=False, na_values=[""], dtype=str)
    out = {}
    for f in fields:
        s = df[f["name"]]
        if f["type"] in ("number", "integer"):
            out[f["name"]] = pd.to_numeric(s).astype(float)
        elif f["type"] == "boolean":
            out[f["name"]] = s.map({"True": True, "False": False})
        else:
            out[f["name"]] = s.astype(object).where(s.notna(), None)
    return pd.DataFrame(out)


def _assert_frames_equal(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    for col in a.columns:
        x, y = a[col], b[col]
        if pd.api.types.is_numeric_dtype(x.dtype) and not pd.api.types.is_bool_dtype(x.dtype):
            np.testing.assert_allclose(x.to_numpy(float), y.to_numpy(float), rtol=1e-15, atol=0,
                                       equal_nan=True, err_msg=col)  # fmt: skip
        else:
            xs = [None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in x]
            ys = [None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in y]
            assert xs == ys, col


def test_datapackage_validates_with_frictionless(tmp_path: Path) -> None:
    frictionless = pytest.importorskip("frictionless")
    t = _enriched()
    paths = export_table(t, tmp_path, provenance=PROV, input_columns=list(t.columns[:4]),
                         project_sha256="ab" * 32, formats=["csv"])  # fmt: skip
    report = frictionless.validate(str(paths["datapackage"]))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])
    desc = json.loads(paths["datapackage"].read_text())
    fields = {f["name"]: f for f in desc["resources"][0]["schema"]["fields"]}
    assert [f for f in fields] == list(t.columns)  # every column, in order
    assert desc["resources"][0]["schema"]["missingValues"] == [""]
    assert fields["site_lat"]["unit"] == "degrees_north" and fields["site_lat"]["type"] == "number"
    assert fields["sst_anom"]["unit"] == "degC" and "anomaly" in fields["sst_anom"]["description"]
    assert fields["sst_anom_distance_km"]["unit"] == "km"
    assert fields["period_start"]["type"] == "date"
    assert fields["fit_included"]["type"] == "boolean"
    # an input column of numbers written as text is typed as numbers; the CSV keeps the text
    assert fields["examined"]["type"] == "integer" and fields["notes"]["type"] == "string"
    env = desc["envlink"]
    assert env["project_sha256"] == "ab" * 32
    assert env["covariates"]["sst_anom"]["spatial"] == "nearest-valid:40km"
    assert {"python", "numpy", "pandas"} <= set(env["software"])
    assert env["rows"] == len(t)


def test_parquet_reads_back_equal_to_csv_with_the_same_metadata(tmp_path: Path) -> None:
    pq = pytest.importorskip("pyarrow.parquet")
    t = _enriched()
    paths = export_table(t, tmp_path, provenance=PROV, formats=["csv", "parquet"])
    desc = json.loads(paths["datapackage"].read_text())
    from_csv = _read_csv_typed(paths["csv"], desc)
    table = pq.read_table(paths["parquet"])
    from_parquet = table.to_pandas()
    _assert_frames_equal(from_csv, from_parquet)
    meta = json.loads(table.schema.metadata[b"envlink"])
    assert meta["resources"][0]["schema"] == desc["resources"][0]["schema"]
    assert meta["envlink"]["covariates"] == desc["envlink"]["covariates"]
    assert table.schema.field("sst_anom").metadata[b"unit"] == b"degC"
    assert str(table.schema.field("period_start").type) == "date32[day]"


def test_geopackage_reads_back_equal_to_csv_with_points_and_polygons(tmp_path: Path) -> None:
    gpd = pytest.importorskip("geopandas")
    import shapely

    t = _enriched()
    paths = export_table(t, tmp_path, formats=["csv", "gpkg"], name="vell")
    desc = json.loads(paths["datapackage"].read_text())
    from_csv = _read_csv_typed(paths["csv"], desc)
    g = gpd.read_file(paths["gpkg"], layer="vell")
    assert g.crs.to_epsg() == 4326
    attrs = pd.DataFrame(g.drop(columns="geometry"))
    for col in ("period_start", "period_end"):  # GeoPackage DATE fields read back as dates
        attrs[col] = [None if pd.isna(v) else pd.Timestamp(v).strftime("%Y-%m-%d") for v in attrs[col]]
    _assert_frames_equal(from_csv, attrs)
    assert g.geometry.iloc[2] is None  # the row without a location keeps its place
    assert set(g.geometry.dropna().geom_type) == {"Point"}  # one geometry type per layer
    np.testing.assert_allclose([g.geometry.iloc[0].x, g.geometry.iloc[0].y],
                               [t.site_lon[0], t.site_lat[0]], rtol=0, atol=1e-12)  # fmt: skip
    regions = gpd.read_file(paths["gpkg"], layer="vell_regions")
    assert regions["reef"].tolist() == ["Vell Mor Lagoon"]  # the region row, its polygon
    assert regions.geometry.iloc[0].equals(shapely.from_wkt(POLY))


def test_fit_written_as_json_contract_and_text(tmp_path: Path) -> None:
    t = _enriched(12).dropna(subset=["effect"]).reset_index(drop=True)
    fit = MetaRegression(moderators="sst_anom").fit(t, effect="effect", variance="variance")
    paths = export_table(t, tmp_path, formats=["csv"], fit=fit)
    d = json.loads(paths["fit_json"].read_text())
    for key in ("format_version", "model", "heterogeneity", "moderator_test", "coefficients",
                "variance_components", "diagnostics", "warnings"):
        assert key in d  # the sections of docs/methods.md, "Result fields"
    assert d["model"]["effects_used"] == len(t)
    np.testing.assert_allclose(d["coefficients"]["table"][1]["estimate"],
                               fit.to_dict()["coefficients"]["table"][1]["estimate"], rtol=1e-12)
    assert paths["fit_text"].read_text().strip() == str(fit.summary()).strip()


def test_existing_output_needs_force_and_bad_format_is_named(tmp_path: Path) -> None:
    t = _enriched()
    first = export_table(t, tmp_path, formats=["csv"])
    before = first["csv"].read_bytes()
    with pytest.raises(InputError, match=r"exists.*enriched\.csv.*force=True"):
        export_table(t.assign(effect=1.0), tmp_path, formats=["csv"])
    assert first["csv"].read_bytes() == before
    export_table(t.assign(effect=1.0), tmp_path, formats=["csv"], force=True)
    assert first["csv"].read_bytes() != before
    with pytest.raises(InputError, match=r"'formats' parameter.*csv, csv-bom, parquet, gpkg, xlsx.*'gpkgg'.*"
                                         r"Did you mean 'gpkg'"):
        export_table(t, tmp_path, formats=["gpkgg"])
    # a file path names the folder and the stem
    paths = export_table(t, tmp_path / "sub" / "mine.csv", formats=["csv"])
    assert paths["csv"] == tmp_path / "sub" / "mine.csv"


_KILLED_EXPORT = textwrap.dedent("""
    import sys, numpy as np, pandas as pd
    from envlink.export import export_table
    n = 150_000
    rng = np.random.default_rng(0)
    t = pd.DataFrame({"reef": [f"reef {i}" for i in range(n)], "site_lat": rng.uniform(-11, -7, n),
                      "site_lon": rng.uniform(-119, -115, n), "effect": rng.normal(size=n)})
    export_table(t, sys.argv[1], name="vell", force=True)
""")


def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())
            if not p.name.startswith(".")}  # fmt: skip


def test_export_killed_midway_leaves_previous_output_intact(tmp_path: Path) -> None:
    export_table(_enriched(), tmp_path, name="vell")
    before = _digest(tmp_path)
    assert set(before) == {"vell.csv", "datapackage.json", "vell.parquet", "vell.gpkg"}
    script = tmp_path.parent / f"{tmp_path.name}_killed_export.py"
    script.write_text(_KILLED_EXPORT)
    proc = subprocess.Popen([sys.executable, str(script), str(tmp_path)])
    try:
        deadline = time.monotonic() + 60
        # wait until the CSV and the descriptor are written to their temporary files and a
        # later file is being written: the export is midway
        while time.monotonic() < deadline and proc.poll() is None:
            parts = [p for p in tmp_path.iterdir() if p.name.startswith(".vell.parquet.")]
            if parts and parts[0].stat().st_size > 0:
                break
            time.sleep(0.005)
        assert proc.poll() is None, "the export finished before it could be interrupted"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == -signal.SIGKILL
    assert _digest(tmp_path) == before  # every previous file byte for byte as it was


def test_file_sha256_matches_hashlib(tmp_path: Path) -> None:
    p = tmp_path / "x.toml"
    p.write_bytes(b"[studies]\npath = 't.csv'\n")
    # reference: hashlib.sha256 (Python standard library)
    assert file_sha256(p) == hashlib.sha256(p.read_bytes()).hexdigest()


def test_geopackage_keeps_user_geometry_and_fid_columns(tmp_path: Path) -> None:
    # A user column named 'geometry' or 'fid' is kept: the layer's geometry column and
    # feature id take other names (GDAL GPKG driver options GEOMETRY_NAME and FID).
    import pyogrio

    t = pd.DataFrame({"reef": ["Pell Bommie", "Ossel Bank"], "geometry": ["reef flat", "slope"],
                      "fid": ["7", "x"], "site_lat": [-9.1, np.nan], "site_lon": [-117.2, np.nan]})
    paths = export_table(t, tmp_path, formats=["csv", "gpkg"])
    info = pyogrio.read_info(paths["gpkg"])
    assert info["geometry_name"] == "geom" and info["fid_column"] == "gpkg_fid"
    assert list(info["fields"][:3]) == ["reef", "geometry", "fid"] and info["features"] == 2
    _, _, geoms, fields = pyogrio.raw.read(paths["gpkg"])
    assert fields[1].tolist() == ["reef flat", "slope"] and fields[2].tolist() == ["7", "x"]


def test_columns_differing_only_in_case_are_refused_for_geopackage(tmp_path: Path) -> None:
    t = pd.DataFrame({"fid": ["1"], "FID": ["2"]})
    with pytest.raises(InputError, match=r"'fid' and 'FID' differ only in case.*leave 'gpkg' out"):
        export_table(t, tmp_path, formats=["csv", "gpkg"])
    assert not list(tmp_path.iterdir())  # nothing written
    assert set(export_table(t, tmp_path, formats=["csv"])) == {"csv", "datapackage"}
