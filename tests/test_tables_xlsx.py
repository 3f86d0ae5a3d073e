"""Excel and Parquet outputs of the commands, and Excel inputs read as written.

Every workbook is read back with openpyxl (a general-purpose library), every Parquet
file with pyarrow. What is checked:

- a text cell starting with ``=`` is a text cell (openpyxl's ``data_type`` ``'s'``,
  not the formula ``'f'``), as docs/outputs.md promises ("a cell starting with ``=``
  stays text, never a formula"), in the outputs of ``sites``, ``attach``, ``effects``,
  ``write_table`` and the ``xlsx`` export format alike;
- a column mixing numbers and text (common practice in compiled tables: ``-3.1`` and
  ``12°30'S`` in one latitude column) is written as text, each cell as written,
  missing cells missing, by every typed writer;
- Excel input cells keep their written form in text outputs: whole numbers without
  ``.0``, dates ISO 8601 (``YYYY-MM-DD``, or ``YYYY-MM-DDTHH:MM:SS`` with a time of
  day), text cells exactly as typed (docs/outputs.md, "Excel inputs").
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from envlink.cli import main
from envlink.tables import read_table, read_table_as_written, write_table

openpyxl = pytest.importorskip("openpyxl")
pq = pytest.importorskip("pyarrow.parquet")

FORMULAS = ["=1+1", '=HYPERLINK("http://x","y")', "=", "=SUM(A1:A2)"]


def _text_cells(path: Path, column: str) -> list[tuple[object, str]]:
    """(value, data_type) of every data cell of ``column`` in the first sheet."""
    ws = openpyxl.load_workbook(path).worksheets[0]
    rows = list(ws.iter_rows())
    j = [c.value for c in rows[0]].index(column)
    return [(r[j].value, r[j].data_type) for r in rows[1:]]


def _located_csv(tmp_path: Path, notes: list[str]) -> Path:
    p = tmp_path / "t.csv"
    pd.DataFrame({"id": [f"z{i}" for i in range(len(notes))], "lat": ["-3.1"] * len(notes),
                  "lon": ["105.2"] * len(notes), "period": ["2001"] * len(notes), "notes": notes,
                  "n": ["10"] * len(notes), "k": ["2"] * len(notes)}).to_csv(p, index=False)
    return p


def test_write_table_never_writes_a_formula(tmp_path: Path) -> None:
    out = write_table(pd.DataFrame({"notes": FORMULAS, "n": [1, 2, 3, 4]}), tmp_path / "o.xlsx")
    assert _text_cells(out, "notes") == [(v, "s") for v in FORMULAS]
    # a header starting with "=" is text too
    out = write_table(pd.DataFrame({"=x": ["a"]}), tmp_path / "h.xlsx")
    header = openpyxl.load_workbook(out).worksheets[0]["A1"]
    assert (header.value, header.data_type) == ("=x", "s")


def test_sites_and_effects_xlsx_keep_formula_text(tmp_path: Path) -> None:
    table = _located_csv(tmp_path, FORMULAS)
    sites = tmp_path / "s.xlsx"
    assert main(["sites", str(table), "-o", str(sites), "--lat", "lat", "--lon", "lon",
                 "--period", "period"]) == 0
    assert _text_cells(sites, "notes") == [(v, "s") for v in FORMULAS]
    effects = tmp_path / "e.xlsx"
    assert main(["effects", str(table), "--kind", "logit_proportion", "--events", "k", "--total", "n",
                 "-o", str(effects)]) == 0
    assert _text_cells(effects, "notes") == [(v, "s") for v in FORMULAS]


def test_attach_xlsx_keeps_formula_text(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import xarray as xr

    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    grid = tmp_path / "g.nc"
    coords = {"time": pd.date_range("2001-01-01", periods=12, freq="MS"), "lat": [-3.5, -2.5], "lon": [104.5, 105.5]}
    xr.Dataset({"sst": (("time", "lat", "lon"), np.full((12, 2, 2), 28.0), {"units": "degC"})},
               coords=coords).to_netcdf(grid)
    out = tmp_path / "a.xlsx"
    assert main(["attach", str(_located_csv(tmp_path, FORMULAS)), "--grid", str(grid), "--name", "sst",
                 "--lat", "lat", "--lon", "lon", "--period", "period", "-o", str(out)]) == 0
    assert _text_cells(out, "notes") == [(v, "s") for v in FORMULAS]


def test_export_xlsx_keeps_formula_text(tmp_path: Path) -> None:
    import envlink

    paths = envlink.export_table(pd.DataFrame({"notes": FORMULAS, "site_lat": [1.0] * 4, "site_lon": [2.0] * 4}),
                                 tmp_path, name="x", formats=["xlsx"])
    assert _text_cells(paths["xlsx"], "notes") == [(v, "s") for v in FORMULAS]


MIXED = [-3.1, "12°30'S", None, 60.0, 7, np.nan]
MIXED_TEXT = ["-3.1", "12°30'S", None, "60", "7", None]


@pytest.mark.parametrize("suffix", [".parquet", ".xlsx"])
def test_write_table_mixed_column_as_text(tmp_path: Path, suffix: str) -> None:
    df = pd.DataFrame({"lat": pd.Series(MIXED, dtype=object), "x": range(6)})
    out = write_table(df, tmp_path / f"o{suffix}")
    if suffix == ".parquet":
        table = pq.read_table(out)
        assert str(table.schema.field("lat").type) in ("string", "large_string")
        assert table.column("lat").to_pylist() == MIXED_TEXT
    else:
        assert _text_cells(out, "lat") == [(v, "s" if v is not None else "n") for v in MIXED_TEXT]


def test_write_table_object_columns_of_one_kind_stay_typed(tmp_path: Path) -> None:
    df = pd.DataFrame({"i": pd.Series([1, None, 3], dtype=object), "f": pd.Series([0.5, 2, None], dtype=object),
                       "d": pd.Series([dt.date(2001, 3, 1), None, dt.date(2002, 1, 5)], dtype=object)})
    table = pq.read_table(write_table(df, tmp_path / "o.parquet"))
    assert [str(table.schema.field(c).type) for c in "ifd"] == ["int64", "double", "date32[day]"]
    assert table.column("i").to_pylist() == [1, None, 3]


def _workbook(path: Path) -> Path:
    """An Excel table as compiled by hand: ints, floats, text numbers, dates, blanks, a mixed column."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["id", "lat", "lon", "start", "end", "n", "k", "code", "note"])
    ws.append(["x1", -3.1, 105.2, dt.datetime(2010, 6, 3), dt.datetime(2010, 6, 20), 60, 6, "007", "NA"])
    ws.append(["x2", "12°30'S", "118°15'E", dt.date(2004, 3, 1), "2004-03-31", 100, 12, "010", 2.5])
    ws.append(["x3", -5.123456789012, 110.5, "March 2004", None, "40", "4", None, None])
    ws.append(["x4", None, None, dt.datetime(2011, 1, 2, 10, 30), None, None, None, "x", True])
    wb.save(path)
    return path


def test_excel_cells_read_as_written(tmp_path: Path) -> None:
    df = read_table_as_written(_workbook(tmp_path / "t.xlsx"))
    assert df["n"].tolist() == ["60", "100", "40", ""]
    assert df["lat"].tolist() == ["-3.1", "12°30'S", "-5.123456789012", ""]
    assert df["start"].tolist() == ["2010-06-03", "2004-03-01", "March 2004", "2011-01-02T10:30:00"]
    assert df["code"].tolist() == ["007", "010", "", "x"]  # text cells as typed, leading zeros kept
    assert df["note"].tolist() == ["NA", "2.5", "", "True"]  # "NA" text is not a missing value


def test_sites_csv_keeps_excel_cells_as_written(tmp_path: Path) -> None:
    out = tmp_path / "o.csv"
    assert main(["sites", str(_workbook(tmp_path / "t.xlsx")), "-o", str(out), "--lat", "lat", "--lon", "lon",
                 "--start", "start", "--end", "end"]) == 0
    got = read_table(out, as_text=True)
    assert got["n"].tolist() == ["60", "100", "40", ""]
    assert got["k"].tolist() == ["6", "12", "4", ""]
    assert got["start"].tolist() == ["2010-06-03", "2004-03-01", "March 2004", "2011-01-02T10:30:00"]
    assert got["end"].tolist() == ["2010-06-20", "2004-03-31", "", ""]
    assert got["lat"].tolist() == ["-3.1", "12°30'S", "-5.123456789012", ""]
    assert got["code"].tolist() == ["007", "010", "", "x"]


@pytest.mark.parametrize("command", ["sites", "effects"])
def test_mixed_excel_column_to_parquet(tmp_path: Path, command: str) -> None:
    out = tmp_path / "o.parquet"
    book = str(_workbook(tmp_path / "t.xlsx"))
    if command == "sites":
        argv = ["sites", book, "--lat", "lat", "--lon", "lon", "--start", "start", "--end", "end"]
    else:
        argv = ["effects", book, "--kind", "logit_proportion", "--events", "k", "--total", "n"]
    assert main([*argv, "-o", str(out)]) == 0
    table = pq.read_table(out)
    assert table.num_rows == 4
    assert table.column("lat").to_pylist()[:3] == ["-3.1", "12°30'S", "-5.123456789012"]
    assert table.column("n").to_pylist() == [60, 100, 40, None]
