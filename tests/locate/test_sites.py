"""The locate() stage over whole tables: mixed forms per row, statuses, flags, notes.

Sites are invented reefs of the fictional Vell Archipelago. Expected coordinates are
arithmetic on the written values (e.g. 8°30' = 8.5°); expected dates follow ISO 8601
(calendar dates, clause 5.2.1) and docs/locate-periods.md (inclusive windows).
"""

from __future__ import annotations

import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from numpy.testing import assert_allclose
from shapely.geometry import Point, Polygon

import envlink
from envlink import InputError
from envlink.locate.gazetteer import read_gazetteer
from envlink.locate.sites import OUTPUT_COLUMNS, locate

LAGOON = Polygon([(158.0, -8.0), (158.5, -8.0), (158.5, -7.5), (158.0, -7.5)])


@pytest.fixture(scope="module")
def gazetteer():
    pts = gpd.GeoDataFrame(
        {"name": ["Kestrel Reef", "Vell Reef A", "Vell Reef B", "Sorrel Bank", "Marl Lagoon"]},
        geometry=[Point(160.25, -8.5), Point(158.0, -7.25), Point(158.5, -7.75), Point(151.5, 6.5), LAGOON],
        crs="EPSG:4326",
    )
    return read_gazetteer(pts)


# one row per case; (lat, lon, coords, site, period) as written in a compiled table
CASES = [
    ("-8.5", "160.25", "", "", "2011"),  # 0 separate columns, a year -> ok
    ("", "", "8°30′S 160°15′E", "", "2012-03-05"),  # 1 coords cell (DMS), ISO date -> ok
    ("", "", "", "Kestrel Reef", "2011-07"),  # 2 exact gazetteer name, year-month -> ok
    ("", "", "", "kestrel reef", "2011"),  # 3 casefold name -> flagged
    ("95.5", "-8.25", "", "", "2011"),  # 4 unambiguously swapped -> flagged
    ("-95", "200", "", "", "2011"),  # 5 latitude beyond ±90 -> rejected
    ("", "", "somewhere west", "", "2011"),  # 6 unreadable coords -> rejected
    ("", "", "", "Nowhere Shoal", "2011"),  # 7 name not in gazetteer -> rejected
    ("", "", "", "", "2011"),  # 8 no place at all -> rejected
    ("1", "", "-7.3, 151.9", "", "2011"),  # 9 half a lat/lon pair, coords used -> flagged
    ("", "5", "", "", "2011"),  # 10 half a pair and nothing else -> rejected
    ("-8.5", "160.25", "", "", "2011-02-29"),  # 11 impossible date -> rejected
    ("-8.5", "160.25", "", "", "05/06/2011"),  # 12 day/month order unknown -> flagged
    ("", "", "", "Sorrel Bank", "summer 2010"),  # 13 plain season, northern site -> flagged
    ("-8.5", "160.25", "", "", "summer 2010"),  # 14 plain season, southern site -> flagged ambiguous
    ("-8.5", "160.25", "", "", "n.d."),  # 15 no period -> flagged
    ("", "", "", "Vell Reef", "2011"),  # 16 two gazetteer places equally close -> flagged, not picked
    ("", "", "", "Marl Lagoon", "2011"),  # 17 polygon site
]


@pytest.fixture(scope="module")
def table() -> pd.DataFrame:
    rows = [dict(zip(("lat", "lon", "position", "reef", "sampled"), c, strict=True)) for c in CASES]
    df = pd.DataFrame(rows)
    df.insert(0, "study", [f"S{i:02d}" for i in range(len(df))])
    df.index = pd.RangeIndex(100, 100 + len(df))  # a non-default index is kept
    return df


@pytest.fixture(scope="module")
def located(table, gazetteer) -> pd.DataFrame:
    return envlink.locate(
        table, lat="lat", lon="lon", coords="position", site="reef", gazetteer=gazetteer, period="sampled"
    )


def _row(located: pd.DataFrame, i: int) -> pd.Series:
    return located.iloc[i]


def test_every_row_in_order_and_input_columns_unchanged(table, located) -> None:
    assert list(located.columns) == list(table.columns) + list(OUTPUT_COLUMNS)
    pd.testing.assert_frame_equal(located[table.columns], table)
    assert list(located.index) == list(table.index)
    assert table.columns.tolist() == ["study", "lat", "lon", "position", "reef", "sampled"]  # input untouched


def test_output_dtypes(located) -> None:
    for col in ("site_lat", "site_lon", "site_precision_km"):
        assert located[col].dtype == np.float64


@pytest.mark.parametrize(
    ("i", "status", "flags"),
    [
        (0, "ok", ""),
        (1, "ok", ""),
        (2, "ok", ""),
        (3, "flagged", "site_name_casefold"),
        (4, "flagged", "swapped_lat_lon"),
        (5, "rejected", "lat_out_of_range"),
        (6, "rejected", "unreadable_coordinate"),
        (7, "rejected", "site_not_found"),
        (8, "rejected", "site_missing"),
        (9, "flagged", "incomplete_lat_lon"),
        (10, "rejected", "lat_missing"),
        (11, "rejected", "impossible_date"),
        (12, "flagged", "ambiguous_day_month"),
        (13, "flagged", "season_by_hemisphere"),
        (14, "flagged", "ambiguous_season"),
        (15, "flagged", "period_missing"),
        (16, "flagged", "ambiguous_site_name"),
        (17, "ok", ""),
    ],
)
def test_status_and_flags_per_case(located, i: int, status: str, flags: str) -> None:
    row = _row(located, i)
    assert row["locate_status"] == status, row["locate_notes"]
    assert flags in row["locate_flags"].split(";") if flags else row["locate_flags"] == ""
    if status == "ok":
        assert row["locate_notes"] == ""
    else:  # every flagged or rejected row explains itself, naming the column
        assert row["locate_notes"].startswith("'"), row["locate_notes"]


def test_coordinates_of_each_form(located) -> None:
    expect = {
        0: (-8.5, 160.25),  # as written
        1: (-8.5, 160.25),  # 8°30′S 160°15′E (arithmetic)
        2: (-8.5, 160.25),  # gazetteer point
        4: (-8.25, 95.5),  # swapped back
        9: (-7.3, 151.9),  # from the coords cell
    }
    for i, (la, lo) in expect.items():
        assert_allclose([_row(located, i)["site_lat"], _row(located, i)["site_lon"]], [la, lo], atol=1e-9)
    for i in (5, 6, 7, 8, 10, 16):  # rejected or not picked: no coordinates
        assert math.isnan(_row(located, i)["site_lat"]) and math.isnan(_row(located, i)["site_lon"])


def test_periods_are_iso_dates_inclusive(located) -> None:
    got = located[["period_start", "period_end", "period_precision"]]
    assert tuple(got.iloc[0]) == ("2011-01-01", "2011-12-31", "year")
    assert tuple(got.iloc[1]) == ("2012-03-05", "2012-03-05", "day")
    assert tuple(got.iloc[2]) == ("2011-07-01", "2011-07-31", "month")
    # a plain summer at a northern site: boreal JJA (meteorological seasons, common practice)
    assert tuple(got.iloc[13]) == ("2010-06-01", "2010-08-31", "season")
    for i in (11, 12, 14, 15):  # unreadable, unresolved or missing: no window, no precision
        assert got.iloc[i].isna().all()


def test_polygon_site_keeps_wkt_and_point_inside(located) -> None:
    row = _row(located, 17)
    poly = shapely.from_wkt(row["site_wkt"])
    assert poly.equals(LAGOON)
    assert poly.contains(Point(row["site_lon"], row["site_lat"]))
    assert located["site_wkt"].isna().sum() == len(located) - 1


def test_notes_name_column_value_and_reason(located) -> None:
    assert "'lat' = '-95'" in _row(located, 5)["locate_notes"]
    assert "'lat'/'lon'/'position'/'reef' all blank" in _row(located, 8)["locate_notes"]
    assert "'reef' = 'Nowhere Shoal'" in _row(located, 7)["locate_notes"]
    assert "'sampled' = '2011-02-29'" in _row(located, 11)["locate_notes"]
    note = _row(located, 16)["locate_notes"]
    assert "'Vell Reef A'" in note and "'Vell Reef B'" in note and "none was chosen" in note


def test_dayfirst_and_monthfirst_resolve_the_order() -> None:
    t = pd.DataFrame({"lat": ["-8.5"], "lon": ["160.25"], "d": ["05/06/2011"]})
    day = locate(t, lat="lat", lon="lon", period="d", order="dayfirst").iloc[0]
    month = locate(t, lat="lat", lon="lon", period="d", order="monthfirst").iloc[0]
    assert (day["period_start"], day["locate_status"]) == ("2011-06-05", "ok")
    assert (month["period_start"], month["locate_status"]) == ("2011-05-06", "ok")


def test_plain_season_south_option() -> None:
    t = pd.DataFrame({"c": ["-8.5 160.25"], "p": ["summer 2010"]})
    row = locate(t, coords="c", period="p", plain_season_south="austral").iloc[0]
    # austral summer 2010 = DJF containing January 2010 (issue 2 item 4)
    assert (row["period_start"], row["period_end"]) == ("2009-12-01", "2010-02-28")


def test_start_and_end_columns() -> None:
    t = pd.DataFrame({"c": ["-8.5 160.25"] * 2, "a": ["2011-03-01", "2011-05-01"], "b": ["2011-03-09", "2011-04-01"]})
    out = locate(t, coords="c", start="a", end="b")
    assert tuple(out.iloc[0][["period_start", "period_end"]]) == ("2011-03-01", "2011-03-09")
    assert out.iloc[1]["locate_status"] == "rejected"  # end before start


def test_numeric_columns_from_python_are_read() -> None:
    t = pd.DataFrame({"la": [-8.5, np.nan], "lo": [160.25, np.nan]})
    out = locate(t, lat="la", lon="lo")
    assert_allclose(out["site_lat"].to_numpy(), [-8.5, np.nan], atol=1e-12)
    assert out["locate_flags"].tolist() == ["", "site_missing"]
    assert pd.isna(out["period_start"]).all()  # no period columns: period left unknown, not flagged


def test_repeated_values_are_parsed_once(monkeypatch) -> None:
    from envlink.locate import coords

    calls = []
    real = coords.parse_coordinates
    monkeypatch.setattr(coords, "parse_coordinates", lambda t: calls.append(t) or real(t))
    t = pd.DataFrame({"c": ["-8.5 160.25", "-7 150"] * 500})
    out = locate(t, coords="c")
    assert len(out) == 1000 and sorted(calls) == ["-7 150", "-8.5 160.25"]


def test_gazetteer_given_as_dataframe() -> None:
    gz = pd.DataFrame({"site": ["Halden Rock"], "lat": ["-12.5"], "lon": ["160.2"]})
    out = locate(pd.DataFrame({"reef": ["Halden Rock"]}), site="reef", gazetteer=gz)
    assert (out.iloc[0]["site_lat"], out.iloc[0]["locate_status"]) == (-12.5, "ok")


def test_existing_output_column_is_an_error() -> None:
    t = pd.DataFrame({"c": ["-8.5 160.25"], "site_lat": ["x"]})
    with pytest.raises(InputError, match=r"already has the column\(s\) 'site_lat'"):
        locate(t, coords="c")


def test_progress_bar_on_request(capsys) -> None:
    locate(pd.DataFrame({"c": ["-8.5 160.25"] * 3}), coords="c", progress=True)
    assert "locate" in capsys.readouterr().err


def test_input_frame_is_not_modified_and_lon_0_360_is_explained() -> None:
    t = pd.DataFrame({"c": ["-8.5 200.25"], "n": [1]})
    before = t.copy(deep=True)
    row = locate(t, coords="c").iloc[0]
    pd.testing.assert_frame_equal(t, before)
    assert_allclose(row["site_lon"], -159.75, atol=1e-9)  # 200.25°E = 159.75°W (arithmetic)
    assert row["locate_flags"] == "lon_0_360" and row["locate_status"] == "flagged"
    assert row["locate_notes"] == "'c' = '-8.5 200.25': the longitude was written in 0-360 and was moved to [-180, 180)."
