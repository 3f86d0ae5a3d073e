"""``envlink sites`` through the command line: files, encodings, exit codes, summary.

Tables and gazetteers are invented (fictional Vell Archipelago reefs) and written
under tmp_path. Exit codes are those of docs/locate.md (0 done, 2 bad input, 1 failure).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from envlink.cli import main
from envlink.tables import read_table

HEADER = "study;lat;lon;position;reef;sampled\n"
ROWS = [
    "Ånsel 1998;-8.5;160.25;;;2011\n",  # separate columns
    "Brönn 2003;;;8°30′S 160°15′E;;2012-03-05\n",  # coords cell
    "Cørr 2010;;;;Kestrel Reef;2011\n",  # gazetteer name
    "Dahl 2011;;;;Nowhere Shoal;2011\n",  # rejected: not in gazetteer
    "Eke 2012;95.5;-8.25;;;2011\n",  # flagged: swapped
]


@pytest.fixture
def files(tmp_path: Path) -> dict[str, Path]:
    gaz = tmp_path / "reefs.csv"
    gaz.write_text("name,lat,lon\nKestrel Reef,-8.5,160.25\n", encoding="utf-8")
    utf8_bom = tmp_path / "bom.csv"
    utf8_bom.write_bytes(("\ufeff" + HEADER + "".join(ROWS)).encode("utf-8"))
    latin1 = tmp_path / "latin1.csv"
    latin1.write_bytes((HEADER + "".join(r.replace("′", "'") for r in ROWS)).encode("latin-1"))
    return {"gaz": gaz, "bom": utf8_bom, "latin1": latin1, "dir": tmp_path}


def _args(table: Path, out: Path, gaz: Path) -> list[str]:
    return ["sites", str(table), "-o", str(out), "--lat", "lat", "--lon", "lon", "--coords", "position",
            "--site", "reef", "--gazetteer", str(gaz), "--period", "sampled"]


@pytest.mark.parametrize("kind", ["bom", "latin1"])
def test_sites_csv_in_both_encodings(files, kind: str, capsys) -> None:
    out = files["dir"] / f"out_{kind}.csv"
    assert main(_args(files[kind], out, files["gaz"])) == 0
    got = read_table(out, as_text=True)
    # original columns unchanged, non-ASCII names decoded correctly, order kept
    assert got["study"].tolist() == ["Ånsel 1998", "Brönn 2003", "Cørr 2010", "Dahl 2011", "Eke 2012"]
    assert got.columns[0] == "study"  # the BOM is not part of the first name
    assert got["locate_status"].tolist() == ["ok", "ok", "ok", "rejected", "flagged"]
    assert got["site_lat"].tolist()[:3] == ["-8.5", "-8.5", "-8.5"]
    err = capsys.readouterr().err
    assert "5 rows" in err and "rejected        1" in err and "site_not_found" in err
    assert "swapped_lat_lon" in err


def test_parquet_and_excel_outputs(files) -> None:
    pq = files["dir"] / "o.parquet"
    assert main(_args(files["bom"], pq, files["gaz"])) == 0
    df = pd.read_parquet(pq)
    assert df["site_lat"].dtype == "float64" and len(df) == 5
    xl = files["dir"] / "o.xlsx"
    assert main(_args(files["bom"], xl, files["gaz"])) == 0
    assert pd.read_excel(xl)["locate_status"].tolist()[3] == "rejected"


def test_existing_output_needs_force(files, capsys) -> None:
    out = files["dir"] / "o.csv"
    out.write_text("keep me")
    assert main(_args(files["bom"], out, files["gaz"])) == 2
    assert "pass --force" in capsys.readouterr().err and out.read_text() == "keep me"
    assert main([*_args(files["bom"], out, files["gaz"]), "--force"]) == 0
    assert out.read_text() != "keep me"


def test_missing_column_exit_2_with_did_you_mean(files, capsys) -> None:
    args = ["sites", str(files["bom"]), "-o", str(files["dir"] / "o.csv"), "--lat", "latt", "--lon", "lon"]
    assert main(args) == 2
    assert "no column 'latt'. Did you mean 'lat'?" in capsys.readouterr().err


def test_unreadable_files_exit_2_with_path_and_reason(files, capsys) -> None:
    missing = files["dir"] / "nope.csv"
    assert main(["sites", str(missing), "-o", str(files["dir"] / "o.csv"), "--coords", "position"]) == 2
    err = capsys.readouterr().err
    assert str(missing) in err and "no such file" in err
    bad_gaz = files["dir"] / "nothing.gpkg"
    bad_gaz.write_text("not a geopackage")
    assert main(_args(files["bom"], files["dir"] / "o.csv", bad_gaz)) == 2
    assert "Cannot read gazetteer" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--season-months", "{wet: 1}"], "--season-months is not valid JSON"),
        (["--season-months", '{"wet": [13]}'], "month numbers 1-12"),
        (["--fuzzy-threshold", "120"], "--fuzzy-threshold must be a score from 0 to 100"),
        (["--dayfirst", "--monthfirst"], "not allowed with argument"),
        (["--plain-season-south", "sideways"], "invalid choice"),
    ],
)
def test_bad_options_exit_2(files, capsys, extra: list[str], message: str) -> None:
    args = ["sites", str(files["bom"]), "-o", str(files["dir"] / "o.csv"), "--coords", "position", *extra]
    assert main(args) == 2
    assert message in capsys.readouterr().err


def test_site_without_gazetteer_is_bad_usage(files, capsys) -> None:
    args = ["sites", str(files["bom"]), "-o", str(files["dir"] / "o.csv"), "--site", "reef"]
    assert main(args) == 2
    assert "--site needs --gazetteer" in capsys.readouterr().err


def test_season_months_from_a_file(files) -> None:
    months = files["dir"] / "seasons.json"
    months.write_text('{"wet": [11, 12, 1, 2, 3, 4]}')
    table = files["dir"] / "wet.csv"
    table.write_text("c,p\n-8.5 160.25,wet 2011\n")
    out = files["dir"] / "wet_out.csv"
    assert main(["sites", str(table), "-o", str(out), "--coords", "c", "--period", "p",
                 "--season-months", str(months)]) == 0
    got = read_table(out, as_text=True).iloc[0]
    # "wet 2011" with wet = Nov-Apr: the season ending in 2011 (periods.py's documented reading)
    assert (got["period_start"], got["period_end"], got["locate_status"]) == ("2010-11-01", "2011-04-30", "ok")


def test_subprocess_exit_codes_and_summary(files) -> None:
    env = {**os.environ, "PYTHONIOENCODING": "utf-8"}
    out = files["dir"] / "sub.csv"
    ok = subprocess.run([sys.executable, "-m", "envlink", *_args(files["latin1"], out, files["gaz"])],
                        capture_output=True, text=True, env=env, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert "ok" in ok.stderr and "flagged" in ok.stderr and "Traceback" not in ok.stderr
    bad = subprocess.run([sys.executable, "-m", "envlink", "sites", str(files["bom"]), "-o", str(out),
                          "--force", "--coords", "positon"], capture_output=True, text=True, env=env, timeout=120)
    assert bad.returncode == 2
    assert "Did you mean 'position'?" in bad.stderr and "Traceback" not in bad.stderr


def test_unknown_output_extension_exit_2_before_any_work(files, capsys) -> None:
    assert main(_args(files["bom"], files["dir"] / "o.json", files["gaz"])) == 2
    assert "unknown extension '.json'" in capsys.readouterr().err


def test_geopackage_gazetteer_with_polygon(files) -> None:
    import geopandas as gpd
    from shapely.geometry import Polygon

    gpkg = files["dir"] / "reefs.gpkg"
    lagoon = Polygon([(158.0, -8.0), (158.5, -8.0), (158.5, -7.5), (158.0, -7.5)])
    gpd.GeoDataFrame({"reef": ["Kestrel Reef"]}, geometry=[lagoon], crs="EPSG:4326").to_file(gpkg)
    out = files["dir"] / "poly.csv"
    assert main(_args(files["bom"], out, gpkg)) == 0
    row = read_table(out, as_text=True).iloc[2]
    assert row["site_wkt"].startswith("POLYGON ((158 -8") and row["locate_status"] == "ok"


def test_parquet_keeps_types_and_reads_float_years(tmp_path: Path) -> None:
    # A Parquet year column holding a blank is float64 (2001.0); it must read as the
    # year 2001, and the user's numeric columns must stay numeric in the output.
    src = tmp_path / "t.parquet"
    pd.DataFrame({"lat": [-8.5, -9.0], "lon": [-117.2, -117.1],
                  "start": [2001.0, 2002.0], "end": [2001.0, float("nan")]}).to_parquet(src)
    out = tmp_path / "o.parquet"
    assert main(["sites", str(src), "-o", str(out), "--lat", "lat", "--lon", "lon",
                 "--start", "start", "--end", "end"]) == 0
    got = pd.read_parquet(out)
    assert str(got["lat"].dtype) == "float64" and str(got["start"].dtype) == "float64"
    # ISO dates are written as Parquet dates (envlink.tables.kinds)
    assert [str(d)[:10] for d in got["period_start"]] == ["2001-01-01", "2002-01-01"]
    assert str(pd.api.types.infer_dtype(got["period_start"])) == "date"
    assert got["locate_flags"].tolist() == ["", "end_missing"]


def test_zero_width_characters_are_ignored(tmp_path: Path) -> None:
    src = tmp_path / "t.csv"
    src.write_text("lat,lon,when\n-8.5\u200b,\ufeff-117.2,2001\u200b\u2060\n", encoding="utf-8")
    out = tmp_path / "o.csv"
    assert main(["sites", str(src), "-o", str(out), "--lat", "lat", "--lon", "lon", "--period", "when"]) == 0
    got = read_table(out, as_text=True)
    assert got.loc[0, "lat"] == "-8.5\u200b"  # the input cell is kept as written
    assert (got.loc[0, "site_lat"], got.loc[0, "period_end"], got.loc[0, "locate_status"]) == (
        "-8.5", "2001-12-31", "ok")


@pytest.mark.parametrize(
    "extra,message",
    [
        (["--lat", "lat"], r"--lat needs --lon COL too"),
        (["--end", "when"], r"--end needs --start COL too"),
        (["--period", "when", "--start", "when", "--end", "when"], r"either --period COL .* not both"),
        ([], r"No column to read: give --lat COL --lon COL"),
    ],
)
def test_option_pairs_named_as_cli_options(tmp_path: Path, capsys, extra: list[str], message: str) -> None:
    src = tmp_path / "t.csv"
    src.write_text("lat,lon,when\n1,2,2001\n")
    assert main(["sites", str(src), "-o", str(tmp_path / "o.csv"), *extra]) == 2
    assert re.search(message, capsys.readouterr().err)


def test_output_folder_and_duplicate_columns_exit_2(tmp_path: Path, capsys) -> None:
    src = tmp_path / "t.csv"
    src.write_text("lat,lon,lat\n1,2,3\n")
    (tmp_path / "o.csv").mkdir()
    assert main(["sites", str(src), "-o", str(tmp_path / "o.csv"), "--lat", "lat", "--lon", "lon"]) == 2
    assert "it is a folder" in capsys.readouterr().err
    assert main(["sites", str(src), "-o", str(tmp_path / "p.csv"), "--lat", "lat", "--lon", "lon"]) == 2
    assert "columns 1 and 3 are both named 'lat'" in capsys.readouterr().err
    assert not (tmp_path / "p.csv").exists()


def test_summary_counts_one_row_in_the_singular(tmp_path: Path, capsys) -> None:
    src = tmp_path / "t.txt"
    src.write_text("lat\tlon\n-8,5\t-117,2\n")  # a .txt table, tab-separated, decimal commas
    assert main(["sites", str(src), "-o", str(tmp_path / "o.tsv"), "--lat", "lat", "--lon", "lon"]) == 0
    assert "envlink sites: 1 row -> " in capsys.readouterr().err
    assert read_table(tmp_path / "o.tsv", as_text=True).loc[0, "site_lat"] == "-8.5"
