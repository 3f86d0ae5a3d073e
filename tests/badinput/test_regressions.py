"""Each fault found by trying envlink with hostile and degenerate inputs, as a test of its own.

These failed before the bad-input work: an input replaced by an output, a table merged
from several encodings read garbled, degenerate polygons and models computed through,
temporary files left by SIGTERM, exit codes off the contract, formula errors reported as
bugs, a blank header cell named by the reader, an Excel cell cut with a library warning.
The corpus (test_corpus.py) holds many more cases of each kind.
"""

from __future__ import annotations

import contextlib
import io
import os
import re
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import envlink
from envlink.cli import main
from envlink.errors import InputError, InvalidValueError, TableWarning

EFFECTS = "study,es,es_var,x,depth.m\na,0.1,0.01,1,1.5\nb,0.2,0.02,2,2.5\nc,0.3,0.03,3,3.5\nd,0.25,0.02,4,4.5\ne,0.5,0.04,5,5.5\n"


def _cli(argv: list[str], cwd: Path) -> tuple[int, str]:
    err = io.StringIO()
    old = Path.cwd()
    os.chdir(cwd)
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
            warnings.simplefilter("default")
            rc = main(argv)
    finally:
        os.chdir(old)
    return rc, err.getvalue()


def test_influence_output_never_replaces_the_input_table(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_text(EFFECTS)
    for extra in ([], ["--force"]):
        rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var", "--influence", "t.csv", *extra],
                       tmp_path)
        assert rc == 2 and "'t.csv' is also an input" in err and "TABLE" in err
        assert (tmp_path / "t.csv").read_text() == EFFECTS


def test_a_table_merged_from_utf8_and_latin1_reads_every_line_as_written(tmp_path: Path) -> None:
    lines = ["reef,lat,lon,when\n", "Récif Nord,-8.5,160.25,2001\n", "Île Sud,-9.25,161.5,2001\n",
             "Ærø Bank,-10,162,2001\n"]
    data = b"".join(line.encode("cp1252" if i == 2 else "utf-8") for i, line in enumerate(lines))
    (tmp_path / "t.csv").write_bytes(data)
    with pytest.warns(TableWarning, match=r"line 3 is not UTF-8 .*Windows-1252"):
        table = envlink.read_table(tmp_path / "t.csv", as_text=True)
    assert table["reef"].tolist() == ["Récif Nord", "Île Sud", "Ærø Bank"]
    gaz = tmp_path / "g.csv"  # the gazetteer in UTF-8 matches every name exactly (no casefold or fuzzy)
    gaz.write_text("name,lat,lon\nRécif Nord,-8.5,160.25\nÎle Sud,-9.25,161.5\nÆrø Bank,-10,162\n")
    (tmp_path / "s.csv").write_bytes(b"reef,when\n" + "Récif Nord,2001\n".encode() + "Île Sud,2001\n".encode(
        "cp1252") + "Ærø Bank,2001\n".encode())
    rc, err = _cli(["sites", "s.csv", "-o", "o.csv", "--site", "reef", "--gazetteer", "g.csv", "--period",
                    "when"], tmp_path)
    out = pd.read_csv(tmp_path / "o.csv", dtype=str, keep_default_na=False)
    assert rc == 0 and out["locate_flags"].tolist() == ["", "", ""], err


def test_a_utf16_table_is_read(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_bytes("lat,lon,when\n-8.5,160.25,2001\n".encode("utf-16"))
    rc, err = _cli(["sites", "t.csv", "-o", "o.csv", "--lat", "lat", "--lon", "lon", "--period", "when"], tmp_path)
    assert rc == 0, err
    assert pd.read_csv(tmp_path / "o.csv")["site_lat"].tolist() == [-8.5]


def test_degenerate_gazetteer_polygons_are_named_not_located(tmp_path: Path) -> None:
    import geopandas as gpd
    import shapely

    gdf = gpd.GeoDataFrame({"name": ["Bow", "Flat"]}, geometry=[
        shapely.Polygon([(160, -8), (161, -9), (161, -8), (160, -9)]),  # crosses itself
        shapely.Polygon([(160, -8), (161, -9), (162, -10)])], crs="EPSG:4326")  # no area
    gdf.to_file(tmp_path / "g.gpkg", engine="pyogrio")
    table = pd.DataFrame({"reef": ["Bow", "Flat"]})
    out = envlink.locate(table, site="reef", gazetteer=envlink.read_gazetteer(tmp_path / "g.gpkg"))
    assert out["locate_status"].tolist() == ["flagged", "rejected"]
    assert out["locate_flags"].tolist() == ["polygon_repaired", "site_polygon_degenerate"]
    # the repaired bow tie is two triangles, half the 1° square: its equal-area radius
    # sqrt(area / pi) (docs/locate.md) from the square's area by pyproj's Geod (GeographicLib)
    from pyproj import Geod

    area, _ = Geod(ellps="WGS84").geometry_area_perimeter(shapely.box(160, -9, 161, -8))
    np.testing.assert_allclose(out["site_precision_km"].iloc[0], np.sqrt(abs(area) / 2 / np.pi) / 1000,
                               rtol=1e-2)
    assert np.isnan(out["site_precision_km"].iloc[1])


def test_a_random_effect_with_one_level_is_refused(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_text(EFFECTS.replace("\na,", "\nA,").replace("\nb,", "\nA,").replace(
        "\nc,", "\nA,").replace("\nd,", "\nA,").replace("\ne,", "\nA,"))
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var", "--nested", "study"], tmp_path)
    assert rc == 2 and "random effect of 'study'" in err and "--nested study" in err


@pytest.mark.parametrize("value", ["1e308", "-1e308"])
def test_effects_beyond_float64_are_named_not_fitted(tmp_path: Path, value: str) -> None:
    (tmp_path / "t.csv").write_text(EFFECTS.replace("b,0.2,", f"b,{value},"))
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var"], tmp_path)
    assert rc == 2 and re.search(r"error: Effect 'es' is too large .* row 2 ", err), err
    with pytest.raises(InvalidValueError, match="row 2"):
        envlink.MetaRegression().fit(y=[0.1, float(value), 0.3], v=[0.01, 0.02, 0.03])


@pytest.mark.parametrize("column, value", [("es_var", "0"), ("es_var", "-0.02"), ("es_var", "inf"), ("es", "inf"),
                                           ("es", "-inf")])
def test_invalid_values_in_fit_are_bad_input(tmp_path: Path, column: str, value: str) -> None:
    text = EFFECTS.replace("b,0.2,0.02,", f"b,0.2,{value}," if column == "es_var" else f"b,{value},0.02,")
    (tmp_path / "t.csv").write_text(text)
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var"], tmp_path)
    assert rc == 2 and re.search(rf"error: .*'{column}' must be .*row 2 has", err), err


def test_a_file_that_is_not_a_grid_is_bad_input_in_run(tmp_path: Path) -> None:
    (tmp_path / "s.csv").write_text("lat,lon,when\n1,10,2000-03\n")
    (tmp_path / "g.nc").write_text("not a grid\n")
    (tmp_path / "p.toml").write_text('[studies]\npath = "s.csv"\n[locate]\nlat = "lat"\nlon = "lon"\n'
                                     'period = "when"\n[grids.sst]\npath = "g.nc"\n[[covariates]]\n'
                                     'name = "sst"\ngrid = "sst"\n[export]\nformats = ["csv"]\nreport = false\n')
    rc, err = _cli(["run", "p.toml", "--no-progress"], tmp_path)
    assert rc == 2 and "grids.sst" in err and "g.nc" in err


@pytest.mark.parametrize("formula", ["I(x.__class__)", "C(x, Treatment(9))"])
def test_any_formula_error_is_bad_input(tmp_path: Path, formula: str) -> None:
    (tmp_path / "t.csv").write_text(EFFECTS)
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var", "--moderators", formula], tmp_path)
    assert rc == 2 and "unexpected error" not in err and "Cannot build the moderators" in err


def test_backticked_columns_with_dots_and_the_suggested_fix_is_valid_syntax(tmp_path: Path) -> None:
    from formulaic import Formula

    (tmp_path / "t.csv").write_text(EFFECTS)
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var", "--moderators", "`depth.m`"], tmp_path)
    assert rc == 0, err
    (tmp_path / "w.csv").write_text(EFFECTS.replace("depth.m", "my x").replace("c,0.3,0.03,3,3.5",
                                                                                "c,0.3,0.03,3,deep"))
    rc, err = _cli(["fit", "w.csv", "--effect", "es", "--variance", "es_var", "--moderators", "`my x`"], tmp_path)
    fix = re.search(r"write (C\(.*?\)) in --moderators", err)
    assert rc == 2 and fix is not None, err
    Formula(fix.group(1))  # the suggestion parses


def test_a_blank_header_cell_is_named_after_its_position(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_text("id,,lat\n1,x,2\n")
    with pytest.warns(TableWarning, match="column 2"):
        table = envlink.read_table(tmp_path / "t.csv", as_text=True)
    assert table.columns.tolist() == ["id", "column_2", "lat"]


def test_an_excel_cell_over_the_limit_is_refused_before_the_work(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_text(f"lat,lon,notes\n1,2,{'x' * 40000}\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no library warning leaks
        rc, err = _cli(["sites", "t.csv", "-o", "o.xlsx", "--lat", "lat", "--lon", "lon"], tmp_path)
    assert rc == 2 and "row 1, column 'notes' holds 40,000 characters" in err
    assert not (tmp_path / "o.xlsx").exists()
    with pytest.raises(InputError, match="32,767"):
        envlink.tables.write_table(pd.DataFrame({"n": ["x" * 40000]}), tmp_path / "w.xlsx")


@pytest.mark.parametrize("name", ["SIGTERM", "SIGHUP"])
def test_sigterm_and_sighup_leave_no_temporary_file(tmp_path: Path, name: str) -> None:
    if not hasattr(signal, name):
        pytest.skip(f"no {name} here")
    (tmp_path / "t.csv").write_text("lat,lon,when\n-8.5,160.25,2001\n")
    (tmp_path / "o.csv").write_text("previous\n")
    env = dict(os.environ, ENVLINK_TEST_PAUSE_WRITE=str(tmp_path / ".paused"),
               PYTHONPATH=str(Path(envlink.__file__).resolve().parents[1]))
    proc = subprocess.Popen([sys.executable, "-m", "envlink", "sites", "t.csv", "-o", "o.csv", "--lat", "lat",
                             "--lon", "lon", "--period", "when", "--force"], cwd=tmp_path, env=env,
                            stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 180
        while not (tmp_path / ".paused").exists():
            assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
            time.sleep(0.05)
        proc.send_signal(getattr(signal, name))
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 128 + getattr(signal, name) and f"stopped by {name}" in err
    assert (tmp_path / "o.csv").read_text() == "previous\n"
    assert not list(tmp_path.glob(".*.part"))


def test_an_io_error_reading_a_valid_table_is_a_failure_of_the_run(tmp_path: Path, monkeypatch) -> None:
    import errno

    (tmp_path / "t.csv").write_text(EFFECTS)
    real = Path.read_bytes

    def failing(self: Path) -> bytes:
        if self.name == "t.csv":
            raise OSError(errno.EIO, "Input/output error")
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", failing)
    rc, err = _cli(["fit", "t.csv", "--effect", "es", "--variance", "es_var"], tmp_path)
    assert rc == 1 and "failed: Cannot read table 't.csv': input/output error" in err
    rc, err = _cli(["fit", "nope.csv", "--effect", "es", "--variance", "es_var"], tmp_path)
    assert rc == 2 and "'nope.csv': no such file" in err  # a path that is not there: bad input


def test_debug_shows_the_traceback_of_bad_input(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_text(EFFECTS)
    rc, err = _cli(["--debug", "fit", "t.csv", "--effect", "nope", "--variance", "es_var"], tmp_path)
    assert rc == 2 and "Traceback" in err and "error: The table has no column 'nope'" in err
