"""Error messages users act on: each names the value, the row or column, and what is allowed.

One file for the whole project (STYLE.md, "Errors and warnings"); each stage appends a
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
