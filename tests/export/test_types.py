"""Exports read back typed with the readers people use: pyarrow, pyogrio, openpyxl, frictionless, duckdb.

References: the Apache Parquet logical types as pyarrow reports them (``int64``,
``double``, ``bool``, ``date32[day]``, ``string``); the OGC GeoPackage 1.2 field
types as GDAL reads them through pyogrio (``int64``, ``float64``, ``bool``,
``datetime64[D]`` for DATE, ``object`` for TEXT) and its schema extension table
``gpkg_data_columns`` (read with the standard library's sqlite3); the Office Open XML
cell types as openpyxl reads them (``n`` number, ``d`` date, ``b`` boolean, ``s``
text); the Frictionless Table Schema field types, checked with
``frictionless.validate``; DuckDB's own Parquet and CSV readers where duckdb is
installed. The kind rules themselves are envlink's (docs/outputs.md).
"""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from envlink import InputError
from envlink.export import export_table
from envlink.tables.kinds import text_kind

POLY = "POLYGON ((-117.2 -8.1, -116.9 -8.1, -116.9 -7.9, -117.2 -7.9, -117.2 -8.1))"
PROV = {"covariates": {"sst_anom": {"grid": "sst_monthly", "stat": "anomaly", "window": "period",
                                    "spatial": "nearest-valid:40km", "units": "degC"}}}


def _table() -> pd.DataFrame:
    """Input columns as a CSV gives them (text as written), then typed added columns."""
    return pd.DataFrame({
        "study_id": ["S01", "S01", "S02", "S03"],
        "examined": ["40", "", "55", "120"],  # integers written as text, one blank
        "depth_m": ["3.5", "12.", "-0.5", "1e1"],  # numbers written as text
        "station": ["007", "012", "113", "9"],  # a leading zero: a code, stays text
        "surveyed": ["2001-03-01", "2001-04-15", "", "2002-01-31"],  # ISO dates written as text
        "bleached": ["TRUE", "False", "true", ""],  # true/false written as text
        "notes": ["=1+1", "said \"deep\", cold", "ü", "1,5"],  # text, a formula-looking cell
        "site_lat": [-9.1, -8.0, np.nan, -10.25],
        "site_lon": [-117.2, -117.05, np.nan, -118.5],
        "site_wkt": [None, POLY, None, None],
        "period_start": ["2001-03-01", "2001-04-01", None, "2002-01-01"],
        "period_end": ["2001-03-31", "2001-04-30", None, "2002-01-31"],
        "sst_anom": [0.25, -0.5, np.nan, 1.0],
        "sst_anom_flags": ["", "nearest_valid_12km", "site_rejected", ""],
        "fit_included": [True, True, False, True],
    })  # fmt: skip


EXPECTED = {"study_id": "string", "examined": "integer", "depth_m": "number", "station": "string",
            "surveyed": "date", "bleached": "boolean", "notes": "string", "site_lat": "number",
            "period_start": "date", "sst_anom": "number", "sst_anom_flags": "string",
            "fit_included": "boolean"}  # fmt: skip


@pytest.fixture
def written(tmp_path: Path) -> dict[str, Path]:
    return export_table(_table(), tmp_path, name="vell", provenance=PROV, input_columns=list(_table().columns[:7]),
                        formats=["csv", "parquet", "gpkg", "xlsx"])  # fmt: skip


def test_text_kind_rules() -> None:
    assert text_kind(["1", "-2", "", None]) == "integer"
    assert text_kind(["1.5", "2", ".5", "1e-3"]) == "number"
    # codes and identifiers stay text: a leading zero, digits beyond 2**53, decimal commas
    assert text_kind(["007"]) == text_kind(["9007199254740993"]) == text_kind(["1,5"]) == "string"
    assert text_kind(["NaN"]) == text_kind(["inf"]) == text_kind([" 12"]) == text_kind(["+5"]) == "string"
    assert text_kind(["2001-02-29"]) == "string"  # not a day (2001 is a common year)
    assert text_kind(["yes", "no"]) == "string" and text_kind([]) == "string"


def test_datapackage_types_validate_and_the_csv_keeps_the_text(written: dict[str, Path]) -> None:
    frictionless = pytest.importorskip("frictionless")
    desc = json.loads(written["datapackage"].read_text())
    types = {f["name"]: f["type"] for f in desc["resources"][0]["schema"]["fields"]}
    assert {k: types[k] for k in EXPECTED} == EXPECTED
    report = frictionless.validate(str(written["datapackage"]))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])
    text = written["csv"].read_text(encoding="utf-8")
    assert "S01,40,3.5,007,2001-03-01,TRUE,=1+1" in text and ",12.,012," in text  # as written
    assert text.splitlines()[1].endswith(",True")  # booleans: Frictionless' default true value


def test_parquet_column_types_read_with_pyarrow(written: dict[str, Path]) -> None:
    pq = pytest.importorskip("pyarrow.parquet")
    schema = pq.read_schema(written["parquet"])
    arrow = {"integer": "int64", "number": "double", "boolean": "bool", "date": "date32[day]",
             "string": "string"}  # fmt: skip
    assert {k: str(schema.field(k).type) for k in EXPECTED} == {k: arrow[v] for k, v in EXPECTED.items()}
    t = pq.read_table(written["parquet"]).to_pylist()
    assert [r["examined"] for r in t] == [40, None, 55, 120]
    assert [r["depth_m"] for r in t] == [3.5, 12.0, -0.5, 10.0]
    assert [r["surveyed"] for r in t] == [dt.date(2001, 3, 1), dt.date(2001, 4, 15), None, dt.date(2002, 1, 31)]
    assert [r["bleached"] for r in t] == [True, False, True, None]
    assert [r["station"] for r in t] == ["007", "012", "113", "9"]


def test_geopackage_layers_field_types_and_data_columns(written: dict[str, Path]) -> None:
    pyogrio = pytest.importorskip("pyogrio")
    layers = {str(name): str(kind) for name, kind in pyogrio.list_layers(written["gpkg"])}
    assert layers == {"vell": "Point", "vell_regions": "Polygon"}  # one geometry type per layer
    gdal = {"integer": "int64", "number": "float64", "boolean": "bool", "date": "datetime64[D]",
            "string": "object"}  # fmt: skip
    for layer in layers:
        info = pyogrio.read_info(written["gpkg"], layer=layer)
        got = dict(zip(info["fields"], info["dtypes"], strict=True))
        assert {k: got[k] for k in EXPECTED} == {k: gdal[v] for k, v in EXPECTED.items()}, layer
    points = pyogrio.read_info(written["gpkg"], layer="vell")
    assert points["features"] == 4 and pyogrio.read_info(written["gpkg"], layer="vell_regions")["features"] == 1
    with sqlite3.connect(written["gpkg"]) as con:
        rows = {(r[0], r[1]): r[2:] for r in con.execute(
            "SELECT table_name, column_name, name, title, description FROM gpkg_data_columns")}
        ext = con.execute("SELECT extension_name FROM gpkg_extensions WHERE table_name = 'gpkg_data_columns'").fetchall()
        sql = con.execute("SELECT sql FROM sqlite_master WHERE name = 'vell'").fetchone()[0]
    con.close()
    assert ext == [("gpkg_schema",)]
    assert rows[("vell", "sst_anom")][:2] == ("sst_anom [degC]", "degC")
    assert "anomaly" in rows[("vell", "sst_anom")][2]
    assert rows[("vell_regions", "site_lat")][1] == "degrees_north"
    assert '"surveyed" DATE' in sql and '"fit_included" BOOLEAN' in sql and '"examined" INTEGER' in sql


def test_excel_cell_types_read_with_openpyxl(written: dict[str, Path]) -> None:
    openpyxl = pytest.importorskip("openpyxl")
    wb = openpyxl.load_workbook(written["xlsx"])
    assert wb.sheetnames == ["vell", "columns", "provenance"]
    ws = wb["vell"]
    header = [c.value for c in ws[1]]
    assert header == list(_table().columns)
    row = {h: c for h, c in zip(header, ws[2], strict=True)}
    assert row["examined"].data_type == "n" and row["examined"].value == 40
    assert row["depth_m"].data_type == "n" and row["depth_m"].value == 3.5
    assert row["surveyed"].is_date and row["surveyed"].value.date() == dt.date(2001, 3, 1)
    assert row["surveyed"].number_format == "yyyy-mm-dd"
    assert row["bleached"].data_type == "b" and row["bleached"].value is True
    assert row["fit_included"].data_type == "b"
    assert row["station"].data_type == "s" and row["station"].value == "007"
    assert row["notes"].data_type == "s" and row["notes"].value == "=1+1"  # text, never a formula
    assert ws["B3"].value is None  # a blank cell is an empty cell
    about = {r[0].value: [c.value for c in r[1:]] for r in wb["columns"].iter_rows(min_row=2)}
    assert about["sst_anom"][:2] == ["number", "degC"]
    prov = {r[0].value: r[1].value for r in wb["provenance"].iter_rows(min_row=2)}
    assert prov["covariates.sst_anom.spatial"] == "nearest-valid:40km"


def test_duckdb_reads_the_parquet_and_csv_typed(written: dict[str, Path]) -> None:
    duckdb = pytest.importorskip("duckdb")
    con = duckdb.connect()
    types = {r[0]: r[1] for r in con.execute(
        f"DESCRIBE SELECT * FROM read_parquet('{written['parquet']}')").fetchall()}
    assert types["examined"] == "BIGINT" and types["surveyed"] == "DATE" and types["fit_included"] == "BOOLEAN"
    csv = {r[0]: r[1] for r in con.execute(f"DESCRIBE SELECT * FROM read_csv('{written['csv']}')").fetchall()}
    assert csv["fit_included"] == "BOOLEAN" and csv["period_start"] == "DATE"


def test_csv_for_spreadsheets_has_a_byte_order_mark(tmp_path: Path) -> None:
    frictionless = pytest.importorskip("frictionless")
    paths = export_table(_table(), tmp_path, name="vell", formats=["CSV_Excel"])
    raw = paths["csv"].read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf") and "ü".encode() in raw  # UTF-8 after the BOM
    assert pd.read_csv(paths["csv"], encoding="utf-8-sig", dtype=str).columns[0] == "study_id"
    report = frictionless.validate(str(paths["datapackage"]))
    assert report.valid, report.flatten(["rowNumber", "fieldName", "type", "note"])
    with pytest.raises(InputError, match=r"both 'csv' and 'csv-bom': they write the same file"):
        export_table(_table(), tmp_path / "b", formats=["csv", "csv-bom"])


@pytest.mark.parametrize("name", ["shp", "Shapefile", "ESRI_Shapefile"])
def test_a_shapefile_is_refused_with_the_reason(tmp_path: Path, name: str) -> None:
    with pytest.raises(InputError, match=r"cannot be .*shapefile cuts column names to 10 characters.*'gpkg'"):
        export_table(_table(), tmp_path, formats=[name])


def test_excel_refuses_control_characters_naming_row_and_column(tmp_path: Path) -> None:
    pytest.importorskip("openpyxl")
    t = _table().assign(notes=["a", "b\x07", "c", "d"])
    with pytest.raises(InputError, match=r"row 2, column 'notes' holds the control character U\+0007"):
        export_table(t, tmp_path, formats=["xlsx"])


# ------------------------------------------------- `envlink attach -o x.parquet` / `-o x.xlsx`
@pytest.fixture
def attach_files(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    import xarray as xr

    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    vals = np.arange(24 * 3 * 2, dtype=float).reshape(24, 3, 2)
    xr.Dataset({"sst": (("time", "lat", "lon"), vals, {"units": "degC"})},
               coords={"time": pd.date_range("2000-01-01", periods=24, freq="MS"),
                       "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5]}).to_netcdf(tmp_path / "g.nc")  # fmt: skip
    (tmp_path / "t.csv").write_text("id,code,n,ok,la,lo,when\n1,007,3.5,TRUE,1.2,10.7,2000-03\n"
                                    "2,008,,FALSE,2.2,10.7,2000-04\n", encoding="utf-8")
    return tmp_path


@pytest.mark.parametrize("suffix", [".parquet", ".xlsx"])
def test_attach_writes_typed_parquet_and_excel(attach_files: Path, suffix: str) -> None:
    pytest.importorskip("pyarrow" if suffix == ".parquet" else "openpyxl")
    from envlink.cli import main

    out = attach_files / f"out{suffix}"
    args = ["attach", str(attach_files / "t.csv"), "--grid", str(attach_files / "g.nc"), "--name", "sst",
            "--lat", "la", "--lon", "lo", "--period", "when", "-o", str(out)]  # fmt: skip
    assert main(args) == 0
    if suffix == ".xlsx":  # the cells as Excel holds them (pandas' reader would re-guess "007")
        import openpyxl

        ws = openpyxl.load_workbook(out).active
        cells = {c[0].value: c[1:] for c in ws.iter_cols()}
        assert [(c.value, c.data_type) for c in cells["id"]] == [(1, "n"), (2, "n")]
        assert [(c.value, c.data_type) for c in cells["n"]][0] == (3.5, "n") and cells["n"][1].value is None
        assert [(c.value, c.data_type) for c in cells["ok"]] == [(True, "b"), (False, "b")]
        assert [(c.value, c.data_type) for c in cells["code"]] == [("007", "s"), ("008", "s")]
        assert cells["period_start"][0].is_date
        return
    back = pd.read_parquet(out)
    assert back["id"].tolist() == [1, 2] and pd.api.types.is_integer_dtype(back["id"])
    assert pd.api.types.is_float_dtype(back["n"]) and back["n"].iloc[0] == 3.5 and pd.isna(back["n"].iloc[1])
    assert back["ok"].tolist() == [True, False]
    assert back["code"].tolist() == ["007", "008"]  # codes keep their leading zeros
    if suffix == ".parquet":
        # a typed input keeps its types through attach: Parquet in, Parquet out
        again = attach_files / "again.parquet"
        assert main(["attach", str(out), "--grid", str(attach_files / "g.nc"), "--name", "sst2", "-o", str(again)]) == 0
        import pyarrow.parquet as pq

        schema = pq.read_schema(again)
        assert str(schema.field("id").type) == "int64" and str(schema.field("ok").type) == "bool"
        assert str(schema.field("period_start").type) == "date32[day]"
