"""Error messages users act on: each names the value, the row or column, and what is allowed.

One file for the whole project (DEVELOPERS.md, "Conventions"); each stage appends a
section. Messages are matched with ``pytest.raises(..., match=...)``.
"""

from __future__ import annotations

import geopandas as gpd
import pandas as pd
import pytest
from shapely.geometry import LineString, Point

import envlink
from envlink import InputError, read_gazetteer
from envlink.commands.sites import parse_season_months
from envlink.locate.gazetteer import SiteNameError

# ---------------------------------------------------------------------------------------
# locate: the locate() stage, the gazetteer and `envlink sites` options
# ---------------------------------------------------------------------------------------

TABLE = pd.DataFrame({"latitude": ["-8.5"], "longitude": ["160.25"], "when": ["2011"]})


def test_locate_missing_column_did_you_mean() -> None:
    with pytest.raises(InputError, match=r"no column 'latitud'\. Did you mean 'latitude'\? Columns: 'latitude'"):
        envlink.locate(TABLE, lat="latitud", lon="longitude")


def test_locate_lat_without_lon() -> None:
    with pytest.raises(InputError, match=r"'lat' and 'lon' go together; 'lon' was not given"):
        envlink.locate(TABLE, lat="latitude")


def test_locate_period_and_start_end_together() -> None:
    with pytest.raises(InputError, match=r"either 'period' \(one column\) or 'start' and 'end', not both"):
        envlink.locate(TABLE, period="when", start="when", end="when")


def test_locate_start_without_end() -> None:
    with pytest.raises(InputError, match=r"'start' and 'end' go together; 'end' was not given"):
        envlink.locate(TABLE, start="when")


def test_locate_nothing_to_read() -> None:
    with pytest.raises(InputError, match=r"no column to read; give lat= and lon=, coords="):
        envlink.locate(TABLE)


def test_locate_site_without_gazetteer() -> None:
    with pytest.raises(InputError, match=r"The 'gazetteer' parameter of locate must be a gazetteer"):
        envlink.locate(TABLE, site="latitude")


def test_locate_bad_order_uses_the_param_template() -> None:
    with pytest.raises(InputError, match=r"The 'order' parameter of locate must be None, 'dayfirst' or 'monthfirst'; got 'day'\."):
        envlink.locate(TABLE, period="when", order="day")


def test_locate_bad_plain_season_south() -> None:
    with pytest.raises(InputError, match=r"'plain_season_south' parameter of locate .* got 'north'"):
        envlink.locate(TABLE, period="when", plain_season_south="north")


def test_locate_not_a_dataframe() -> None:
    with pytest.raises(InputError, match=r"'table' parameter of locate must be a pandas DataFrame; got 'list'"):
        envlink.locate([1, 2], coords="c")


def test_locate_output_column_clash() -> None:
    with pytest.raises(InputError, match=r"already has the column\(s\) 'locate_status' .* Rename or drop them"):
        envlink.locate(TABLE.assign(locate_status="ok"), lat="latitude", lon="longitude")


def test_gazetteer_missing_file() -> None:
    with pytest.raises(InputError, match=r"Cannot read gazetteer '.*nope\.gpkg': no such file"):
        read_gazetteer("nope.gpkg")


def test_gazetteer_no_name_column() -> None:
    with pytest.raises(InputError, match=r"no site-name column \(looked for site, site_name.*Columns: 'id', 'lat', 'lon'"):
        read_gazetteer(pd.DataFrame({"id": ["a"], "lat": ["1"], "lon": ["2"]}))


def test_gazetteer_without_rows(tmp_path) -> None:
    path = tmp_path / "reefs.csv"
    path.write_text("name,lat,lon\n")
    with pytest.raises(InputError, match=r"Gazetteer '.*reefs\.csv' holds no sites \(no data rows\)"):
        read_gazetteer(path)


def test_gazetteer_named_column_missing_did_you_mean() -> None:
    with pytest.raises(InputError, match=r"has no column 'reefname'\. Did you mean 'reef_name'\?"):
        read_gazetteer(pd.DataFrame({"reef_name": ["a"], "lat": ["1"], "lon": ["2"]}), name_col="reefname")


def test_gazetteer_no_coordinate_columns() -> None:
    with pytest.raises(InputError, match=r"no coordinate columns .* name them with lat_col=/lon_col="):
        read_gazetteer(pd.DataFrame({"name": ["Kestrel Reef"], "depth": ["3"]}))


def test_gazetteer_bad_coordinates_name_row_and_site() -> None:
    df = pd.DataFrame({"name": ["Kestrel Reef", "Ossel Bank"], "lat": ["-8.5", "-97"], "lon": ["160", "161"]})
    with pytest.raises(InputError, match=r"row 2 \(site 'Ossel Bank'\): lat: latitude -97(\.0)? is beyond ±90"):
        read_gazetteer(df)


def test_gazetteer_blank_name() -> None:
    with pytest.raises(InputError, match=r"row 1: the site name \('name'\) is blank"):
        read_gazetteer(pd.DataFrame({"name": [""], "lat": ["1"], "lon": ["2"]}))


def test_gazetteer_line_geometry_is_not_a_site() -> None:
    gdf = gpd.GeoDataFrame({"name": ["Track"]}, geometry=[LineString([(0, 0), (1, 1)])], crs="EPSG:4326")
    with pytest.raises(InputError, match=r"feature 1 \(site 'Track'\): a LineString is not a site; expected points or polygons"):
        read_gazetteer(gdf)


def test_gazetteer_without_crs_in_metres() -> None:
    gdf = gpd.GeoDataFrame({"name": ["Grid Pt"]}, geometry=[Point(500000, 9050000)])
    with pytest.raises(InputError, match=r"states no coordinate reference system .* set its CRS"):
        read_gazetteer(gdf)


def test_gazetteer_point_beyond_90_degrees() -> None:
    gdf = gpd.GeoDataFrame({"name": ["Odd Pt"]}, geometry=[Point(10, 95)], crs="EPSG:4326")
    with pytest.raises(InputError, match=r"feature 1 \(site 'Odd Pt'\): latitude 95 is beyond ±90; is the file's coordinate"):
        read_gazetteer(gdf)


def test_gazetteer_bad_precision_value() -> None:
    df = pd.DataFrame({"name": ["Kestrel Reef"], "lat": ["-8.5"], "lon": ["160"], "precision_km": ["about 2"]})
    with pytest.raises(InputError, match=r"row 1 \(site 'Kestrel Reef'\): precision 'about 2' in column 'precision_km' is not a number of km"):
        read_gazetteer(df)


def test_site_not_found_names_the_closest() -> None:
    gz = read_gazetteer(pd.DataFrame({"name": ["Kestrel Reef"], "lat": ["-8.5"], "lon": ["160.25"]}))
    with pytest.raises(SiteNameError, match=r"site 'Kestrel': not in \(table\); the closest is 'Kestrel Reef' \(score \d+ < threshold 85\)"):
        gz.match("Kestrel")


@pytest.mark.parametrize(
    ("value", "message"),
    [
        ("{wet: [1]}", r"--season-months is not valid JSON \(Expecting property name"),
        ('{"wet": [0, 13]}', r"must map season names to lists of month numbers 1-12"),
        ('{"wet": []}', r"must map season names to lists of month numbers 1-12"),
        ("seasons.json", r"--season-months 'seasons\.json' is neither a JSON object nor a file"),
    ],
)
def test_season_months_option(value: str, message: str) -> None:
    with pytest.raises(InputError, match=message):
        parse_season_months(value)


# ---------------------------------------------------------------------------------------
# cli: the dispatcher
# ---------------------------------------------------------------------------------------


def test_closed_stdout_is_not_reported_as_a_bug(tmp_path, monkeypatch, capsys) -> None:
    # `envlink grid FILE --json | head -1` closes stdout early; that is no bug of envlink.
    import sys

    import numpy as np
    import xarray as xr

    from envlink.cli import main

    path = tmp_path / "g.nc"
    xr.Dataset(
        {"sst": (("time", "lat", "lon"), np.zeros((2, 2, 2)), {"units": "degC"})},
        coords={"time": ("time", [0.0, 1.0], {"units": "days since 2000-01-01", "standard_name": "time"}),
                "lat": ("lat", [0.5, 1.5], {"units": "degrees_north", "standard_name": "latitude"}),
                "lon": ("lon", [0.5, 1.5], {"units": "degrees_east", "standard_name": "longitude"})},
    ).to_netcdf(path)

    class Closed:
        def write(self, text: str) -> int:
            raise BrokenPipeError(32, "Broken pipe")

        def flush(self) -> None:
            raise BrokenPipeError(32, "Broken pipe")

    monkeypatch.setattr(sys, "stdout", Closed())
    assert main(["grid", str(path), "--json"]) == 1
    assert "bug" not in capsys.readouterr().err


# ---------------------------------------------------------------------------------------
# cli: library messages name Python parameters; the command line shows its options
# ---------------------------------------------------------------------------------------


@pytest.fixture
def cli_files(tmp_path, monkeypatch):
    import numpy as np
    import xarray as xr

    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    vals = np.arange(24 * 3 * 2, dtype=float).reshape(24, 3, 2)
    coords = {"time": pd.date_range("2000-01-01", periods=24, freq="MS"), "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5]}
    dims = ("time", "lat", "lon")
    xr.Dataset({"sst": (dims, vals, {"units": "degC"})}, coords=coords).to_netcdf(tmp_path / "g.nc")
    xr.Dataset({"sst": (dims, vals, {"units": "degC"}), "air": (dims, vals, {"units": "degC"})},
               coords=coords).to_netcdf(tmp_path / "two.nc")
    pd.DataFrame({"id": [1], "site_lat": [1.2], "site_lon": [10.7], "period_start": ["2000-03-01"],
                  "period_end": ["2000-03-31"]}).to_csv(tmp_path / "located.csv", index=False)
    pd.DataFrame({"id": [1], "reef": ["Kestrel Reef"], "when": ["summer 2010"]}).to_csv(tmp_path / "s.csv", index=False)
    return tmp_path


def _cli(capsys, *argv: str) -> tuple[int, str]:
    from envlink.cli import main

    rc = main([str(a) for a in argv])
    return rc, capsys.readouterr().err


def test_cli_parameter_error_names_the_option(cli_files, capsys) -> None:
    f = cli_files
    rc, err = _cli(capsys, "attach", f / "located.csv", "--grid", f / "g.nc", "--name", "x",
                   "--min-coverage", "2", "-o", f / "o.csv")
    assert rc == 2
    # common practice: the command line names its option, not the Python parameter or function
    assert "The option --min-coverage must be a fraction from 0 to 1; got 2.0." in err
    assert "min_coverage" not in err and "parameter of" not in err


def test_scan_messages_name_options_not_python_functions(cli_files, capsys) -> None:
    # common practice: a command-line message names the command's options; the Python
    # functions behind it (scan_windows, MetaRegression, attach, scan) stay unnamed
    f = cli_files
    rows = pd.DataFrame({"id": range(1, 7), "site_lat": 1.2, "site_lon": 10.7,
                         "period_start": [f"2000-{m:02d}-01" for m in range(3, 9)],
                         "period_end": [f"2000-{m:02d}-28" for m in range(3, 9)],
                         "es": [0.1, 0.3, 0.2, 0.5, 0.4, 0.6], "v": 0.05, "study": list("aabbcc")})
    rows.to_csv(f / "eff.csv", index=False)
    base = ["scan", f / "eff.csv", "--grid", f / "g.nc", "--effect", "es", "--variance", "v", "--unit", "M",
            "--lags", "0..1", "--spans", "1..2", "--permutations", "9", "--no-progress", "--no-cache"]
    cases = [
        (["--method", "PM"], "The option --method must be 'REML', 'ML' or 'DL' ('REML' or 'ML' with --nested)"),
        (["--method", "HS"], "The option --method must be one of 'REML', 'ML', 'DL'"),
        (["--unit", "Q"], "The option --unit must be 'D' (days) or 'M' (whole months); got 'Q'."),
        (["--stat", "avg"], "The option --stat must be one of 'mean'"),
        (["--min-coverage", "2"], "The option --min-coverage must be a fraction from 0 to 1; got 2.0."),
        (["--mmm", "30"], "The option --mmm must be given only with --stat dhw-max"),
        (["--permute", "within"], "fit the model with --nested COLUMN, or use --permute rows."),
        (["--effect", "ess"], "--effect: The table has no column 'ess'. Did you mean 'es'?"),
    ]
    for extra, message in cases:
        rc, err = _cli(capsys, *base, *extra)
        assert rc == 2 and message in err, (extra, err)
        for python_name in ("scan_windows", "MetaRegression", "parameter of", "nested=", "stat="):
            assert python_name not in err, (extra, err)


def test_cli_parameter_mentions_are_written_as_options(cli_files, capsys) -> None:
    f = cli_files
    rc, err = _cli(capsys, "attach", f / "located.csv", "--grid", f / "g.nc", "--name", "x",
                   "--mmm", "28", "-o", f / "o.csv")
    # the library says "given only with stat='dhw-max'"; the command line says --stat dhw-max
    assert rc == 2 and "The option --mmm must be given only with --stat dhw-max; got 28.0." in err
    rc, err = _cli(capsys, "grid", f / "two.nc")
    assert rc == 2 and "holds several gridded variables: sst, air. Choose one with --var NAME." in err
    rc, err = _cli(capsys, "attach", f / "located.csv", "--grid", f / "two.nc", "--name", "x", "-o", f / "o.csv")
    assert rc == 2 and "Choose one with --var NAME." in err


def test_library_messages_name_the_python_parameter(cli_files) -> None:
    from envlink.tables import check_output_path

    with pytest.raises(InputError, match=r"exists; pass force=True to overwrite it\.$"):
        check_output_path(cli_files / "s.csv")
    with pytest.raises(InputError, match=r"Choose one with variable='NAME'\.$"):
        envlink.open_grid(cli_files / "two.nc")


def test_cli_force_and_gazetteer_name_options(cli_files, capsys) -> None:
    f = cli_files
    rc, err = _cli(capsys, "sites", f / "s.csv", "-o", f / "located.csv", "--period", "when")
    assert rc == 2 and "exists; pass --force to overwrite it." in err and "force=True" not in err
    pd.DataFrame({"id": [1], "lat": ["1"], "lon": ["2"]}).to_csv(f / "gz.csv", index=False)
    rc, err = _cli(capsys, "sites", f / "s.csv", "-o", f / "new.csv", "--site", "reef", "--gazetteer", f / "gz.csv")
    assert rc == 2 and "name it with --gazetteer-name COLUMN." in err


def test_cli_notes_of_grid_name_the_options(tmp_path, capsys) -> None:
    import numpy as np
    import xarray as xr

    from envlink.cli import main

    path = tmp_path / "nocal.nc"
    xr.Dataset(
        {"sst": (("time", "lat", "lon"), np.zeros((2, 2, 2)), {"units": "degC"})},
        coords={"time": ("time", [0.0, 31.0], {"units": "days since 2000-01-01"}),
                "lat": ("lat", [0.5, 1.5], {"units": "degrees_north"}),
                "lon": ("lon", [0.5, 1.5], {"units": "degrees_east"})},
    ).to_netcdf(path)
    assert envlink.grid_info(path).warnings  # the Python notes say calendar='NAME' ...
    assert any("calendar='NAME'" in w for w in envlink.grid_info(path).warnings)
    assert main(["grid", str(path)]) == 0
    out = capsys.readouterr().out
    assert "(declare another with --calendar NAME)" in out and "calendar='NAME'" not in out


@pytest.mark.parametrize("command", ["sites", "grid", "attach", "fit", "run", "demo"])
def test_param_options_name_real_options(command: str) -> None:
    # every option a PARAM_OPTIONS mapping names is an option of that command's parser
    from envlink.cli import build_parser, param_options
    from envlink.commands.options import option_names

    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    known = {s for a in sub.choices[command]._actions for s in a.option_strings}
    options = param_options(command)
    assert options, f"envlink.commands.{command} declares no PARAM_OPTIONS"
    for param, spec in options.items():
        assert set(option_names(spec)) <= known, (command, param, spec)


def test_locate_notes_carry_both_names() -> None:
    # the notes are cells of the output table, the same from Python and from `envlink sites`
    t = pd.DataFrame({"lat": ["-8.5", "-8.5"], "lon": ["160.25", "160.25"], "when": ["summer 2010", "05/06/2011"]})
    ambiguous = envlink.locate(t, lat="lat", lon="lon", period="when")["locate_notes"].tolist()
    assert "(plain_season_south='austral' or 'boreal'; --plain-season-south on the command line)" in ambiguous[0]
    assert "(order='dayfirst' or 'monthfirst'; --dayfirst or --monthfirst on the command line)" in ambiguous[1]
    read = envlink.locate(t.iloc[:1], lat="lat", lon="lon", period="when", plain_season_south="austral")
    assert "(plain_season_south='austral'; --plain-season-south austral on the command line)" in read["locate_notes"][0]


def test_command_line_text_examples_run() -> None:
    # tests/test_docstrings.py leaves envlink.commands out; the translation's examples run here
    import doctest

    import envlink.commands.options as options

    result = doctest.testmod(options, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 5 and result.failed == 0


def test_command_line_text_leaves_lists_and_unknown_values_alone() -> None:
    from envlink.commands.options import command_line_text

    opts = {"band_dates": "--band-dates", "force": "--force", "units": "--units"}
    text = "give band_dates=[(start, end), ...] or band_dates= for one file; force=False; units='kg m-2 s-1'"
    assert command_line_text(text, opts) == (
        "give band_dates=[(start, end), ...] or --band-dates for one file; force=False; --units 'kg m-2 s-1'"
    )
