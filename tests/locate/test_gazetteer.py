"""Gazetteer: reading CSV / GeoPackage / DataFrame sources and matching site names.

Places are invented reefs of the fictional Vell Archipelago. Geodesic references are
pyproj's Geod (GeographicLib) and Transformer, called independently of envlink.
"""

from __future__ import annotations

import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from numpy.testing import assert_allclose
from pyproj import Geod, Transformer
from rapidfuzz import fuzz
from shapely.geometry import Point, Polygon

from envlink import InputError, read_gazetteer
from envlink.locate.gazetteer import Gazetteer, Match, SiteNameError, normalise_name

REEFS = pd.DataFrame(
    {
        "Site": ["Kestrel Reef", "Ossë Bank", "Tarn Reef", "TARN REEF", "Vell Reef A", "Vell Reef B"],
        "Latitude": ["-8.50", "8°30'S", "-9.1", "-9.3", "-7.25", "-7.75"],
        "Longitude": ["160.25", "161°15'E", "159.5", "159.6", "158.0", "158.5"],
    }
)


@pytest.fixture
def gz() -> Gazetteer:
    return read_gazetteer(REEFS)


def test_exact_match_takes_the_coordinates_and_text_precision(gz: Gazetteer) -> None:
    m = gz.match("Kestrel Reef")
    assert isinstance(m, Match)
    assert (m.name, m.method, m.score, m.flags, m.wkt) == ("Kestrel Reef", "exact", 100.0, (), None)
    assert_allclose([m.lat, m.lon], [-8.5, 160.25], atol=1e-12)
    # two decimals written: one unit of the last digit is 0.01° of latitude arc
    # (coords.py convention, 111.195 km per degree on the mean sphere: common practice)
    assert_allclose(m.precision_km, 0.01 * 111.195, rtol=1e-3)


def test_dms_gazetteer_coordinates_are_parsed(gz: Gazetteer) -> None:
    m = gz.match("Ossë Bank")
    assert_allclose([m.lat, m.lon], [-8.5, 161.25], atol=1e-12)  # 8°30'S = -8.5 (arithmetic)


def test_case_and_accent_insensitive_match_is_flagged(gz: Gazetteer) -> None:
    m = gz.match("  osse   BANK ")
    assert (m.name, m.method, m.flags) == ("Ossë Bank", "casefold", ("site_name_casefold",))
    assert "ignoring case and accents" in m.notes[0]


def test_normalise_name_folds_accents_case_punctuation() -> None:
    assert normalise_name("Récif-d'OSSË  nord") == "recif d osse nord"
    assert normalise_name("ﬁsher reef") == "fisher reef"  # NFKD splits the ligature (Unicode UAX #15)


def test_fuzzy_match_reports_rapidfuzz_token_sort_score(gz: Gazetteer) -> None:
    m = gz.match("Kestrl Reef")
    assert (m.name, m.method, m.flags) == ("Kestrel Reef", "fuzzy", ("site_name_fuzzy",))
    # reference: rapidfuzz.fuzz.token_sort_ratio on the folded names, called directly
    assert_allclose(m.score, fuzz.token_sort_ratio("kestrl reef", "kestrel reef"), atol=1e-9)
    assert m.candidates[0][0] == "Kestrel Reef"


def test_word_order_does_not_matter_for_fuzzy(gz: Gazetteer) -> None:
    assert gz.match("Reef Kestrel").name == "Kestrel Reef"


def test_fuzzy_below_threshold_is_not_found_and_names_the_closest(gz: Gazetteer) -> None:
    with pytest.raises(SiteNameError, match=r"'Kestrel'.*closest is 'Kestrel Reef' \(score \d+ < threshold 85\)") as err:
        gz.match("Kestrel")
    assert (err.value.field, err.value.code) == ("site", "site_not_found")


def test_threshold_is_an_option(gz: Gazetteer) -> None:
    assert gz.match("Kestrel", threshold=70).name == "Kestrel Reef"


def test_two_fuzzy_candidates_within_margin_are_ambiguous_not_picked(gz: Gazetteer) -> None:
    m = gz.match("Vell Reef")
    assert m.flags == ("ambiguous_site_name",)
    assert m.name is None and math.isnan(m.lat) and math.isnan(m.lon)
    assert {c for c, _ in m.candidates} == {"Vell Reef A", "Vell Reef B"}
    assert "'Vell Reef A'" in m.notes[0] and "'Vell Reef B'" in m.notes[0]
    # a margin of 0 still sees two equal scores (90 and 90) as ambiguous
    assert gz.match("Vell Reef", margin=0).flags == ("ambiguous_site_name",)


def test_casefold_collision_between_two_places_is_ambiguous(gz: Gazetteer) -> None:
    assert gz.match("Tarn Reef").method == "exact"  # the exact spelling is unique
    m = gz.match("tarn reef")
    assert m.flags == ("ambiguous_site_name",) and m.name is None


def test_duplicate_rows_of_one_place_are_not_ambiguous() -> None:
    g = read_gazetteer(pd.DataFrame({"name": ["Lune Shoal", "lune shoal"], "lat": [-7, -7], "lon": [150, 150]}))
    assert g.match("LUNE SHOAL").name == "Lune Shoal"


def test_csv_file_with_coords_column_and_bom(tmp_path) -> None:
    p = tmp_path / "gaz.csv"
    p.write_bytes("\ufeffreef;coordinates;precision_km\nHalden Rock;12,5S 160,2E;2\n".encode())
    g = read_gazetteer(p)
    m = g.match("Halden Rock")
    assert_allclose([m.lat, m.lon, m.precision_km], [-12.5, 160.2, 2.0], atol=1e-12)


def test_csv_gazetteer_with_swapped_pair_carries_the_flag(tmp_path) -> None:
    p = tmp_path / "gaz.csv"
    p.write_text("name,lat,lon\nFenn Reef,160.5,-8.25\n", encoding="utf-8")
    m = read_gazetteer(p).match("Fenn Reef")
    assert_allclose([m.lat, m.lon], [-8.25, 160.5], atol=1e-12)
    assert m.flags == ("swapped_lat_lon",)


def test_geopackage_points(tmp_path) -> None:
    p = tmp_path / "pts.gpkg"
    gdf = gpd.GeoDataFrame({"name": ["Brack Head"]}, geometry=[Point(200.0, -8.0)], crs="EPSG:4326")
    gdf.to_file(p, engine="pyogrio")
    m = read_gazetteer(p).match("Brack Head")
    assert_allclose([m.lat, m.lon], [-8.0, -160.0], atol=1e-12)  # 200°E = 160°W (arithmetic)
    assert m.wkt is None and math.isnan(m.precision_km)  # unknown for a file point


def _square(lon0: float, lat0: float, d: float) -> Polygon:
    return Polygon([(lon0, lat0), (lon0 + d, lat0), (lon0 + d, lat0 + d), (lon0, lat0 + d)])


def test_geopackage_polygon_kept_as_wkt_with_point_inside_and_equivalent_radius(tmp_path) -> None:
    p = tmp_path / "poly.gpkg"
    # an L-shaped lagoon, so the centroid would fall outside the polygon
    lagoon = Polygon([(160, -9), (160.4, -9), (160.4, -8.9), (160.1, -8.9), (160.1, -8.5), (160, -8.5)])
    gpd.GeoDataFrame({"site_name": ["Vell Lagoon"]}, geometry=[lagoon], crs="EPSG:4326").to_file(p)
    m = read_gazetteer(p).match("Vell Lagoon")
    back = shapely.from_wkt(m.wkt)
    assert back.equals(lagoon)  # WKT round trip (OGC Simple Features)
    assert back.contains(Point(m.lon, m.lat))
    assert not lagoon.contains(lagoon.centroid)
    # reference: pyproj.Geod(ellps="WGS84").geometry_area_perimeter, radius of equal-area circle
    area, _ = Geod(ellps="WGS84").geometry_area_perimeter(lagoon)
    assert_allclose(m.precision_km, math.sqrt(abs(area) / math.pi) / 1000, rtol=1e-12)


def test_polygon_radius_agrees_with_spherical_cell_area() -> None:
    sq = _square(158.0, -8.0, 0.5)
    m = read_gazetteer(gpd.GeoDataFrame({"name": ["Cell"]}, geometry=[sq], crs="EPSG:4326")).match("Cell")
    # sphere cell area R² Δλ (sin φ2 − sin φ1), R = 6371.0088 km (envlink.geo.cell_area_km2); the WGS84
    # ellipsoid differs from the sphere by well under 1 % here
    r = 6371.0088
    area = r**2 * math.radians(0.5) * abs(math.sin(math.radians(-7.5)) - math.sin(math.radians(-8.0)))
    assert_allclose(m.precision_km, math.sqrt(area / math.pi), rtol=1e-2)


def test_projected_geopackage_is_reprojected_to_wgs84(tmp_path) -> None:
    utm = "EPSG:32758"  # WGS 84 / UTM zone 58S
    x, y = 500_000.0, 9_050_000.0
    poly = _square(x, y, 5_000.0)
    gdf = gpd.GeoDataFrame({"name": ["Hollin Pt", "Hollin Flats"]}, geometry=[Point(x, y), poly], crs=utm)
    p = tmp_path / "utm.gpkg"
    gdf.to_file(p)
    g = read_gazetteer(p)
    tr = Transformer.from_crs(utm, "EPSG:4326", always_xy=True)  # reference transform
    lon, lat = tr.transform(x, y)
    m = g.match("Hollin Pt")
    assert_allclose([m.lon, m.lat], [lon, lat], atol=1e-9)
    flats = shapely.from_wkt(g.match("Hollin Flats").wkt)
    ref = shapely.transform(poly, lambda c: np.column_stack(tr.transform(c[:, 0], c[:, 1])))
    assert_allclose(shapely.get_coordinates(flats), shapely.get_coordinates(ref), atol=1e-9)


def test_geojson_and_geodataframe_sources(tmp_path) -> None:
    gdf = gpd.GeoDataFrame({"Reef": ["Sorrel Bank"]}, geometry=[Point(151.5, -7.5)], crs="EPSG:4326")
    p = tmp_path / "g.geojson"
    gdf.to_file(p, driver="GeoJSON")
    assert read_gazetteer(p).match("Sorrel Bank").lat == -7.5
    assert read_gazetteer(gdf).match("Sorrel Bank").lon == 151.5


def test_explicit_column_names() -> None:
    df = pd.DataFrame({"ref": ["Quill Reef"], "northing": ["-6.5"], "easting": ["155.5"]})
    m = read_gazetteer(df, name_col="ref", lat_col="northing", lon_col="easting").match("Quill Reef")
    assert (m.lat, m.lon) == (-6.5, 155.5)


def test_polygon_drawn_across_the_antimeridian_is_kept_but_flagged() -> None:
    ring = Polygon([(179.5, -17.0), (-179.5, -17.0), (-179.5, -16.0), (179.5, -16.0)])
    split = shapely.MultiPolygon([_square(179.5, -17.0, 0.5), _square(-180.0, -17.0, 0.5)])
    g = read_gazetteer(gpd.GeoDataFrame({"name": ["Wide", "Split"]}, geometry=[ring, split], crs="EPSG:4326"))
    wide = g.match("Wide")
    assert wide.flags == ("polygon_spans_antimeridian",) and shapely.from_wkt(wide.wkt).equals(ring)
    good = g.match("Split")
    assert good.flags == ()
    # the split region is 1° of longitude by 0.5° of latitude: the same area as such a cell
    # anywhere on that latitude band (pyproj Geod reference)
    cell = Polygon([(10.0, -17.0), (11.0, -17.0), (11.0, -16.5), (10.0, -16.5)])
    area, _ = Geod(ellps="WGS84").geometry_area_perimeter(cell)
    # (Geod joins vertices by geodesics, not parallels, so two 0.5° parts and one 1° part
    # differ by ~1e-5 relative: geometry, not error)
    assert_allclose(good.precision_km, math.sqrt(abs(area) / math.pi) / 1000, rtol=1e-4)


@pytest.mark.parametrize("reported", ["Kestle\u00a0Reef", "Kestle Reef\u200b", "Kes\u200btle Reef", "\ufeffKestle  Reef"])
def test_invisible_and_no_break_spaces_match_exactly(reported: str) -> None:
    # copy-paste from PDFs and web pages leaves no-break and zero-width spaces (common
    # practice); they are not a spelling difference
    gz = read_gazetteer(pd.DataFrame({"name": ["Kestle Reef"], "lat": ["-8.664"], "lon": ["-117.8755"]}))
    m = gz.match(reported)
    assert (m.name, m.method, m.flags) == ("Kestle Reef", "exact", ())


# ------------------------------------------------ a CSV gazetteer reads as a GeoPackage does
def _demo(name: str):
    from envlink.demo_grids import data_path

    return data_path(name)


def test_csv_wkt_polygons_come_back_as_regions_like_the_geopackage() -> None:
    from_csv, from_gpkg = read_gazetteer(_demo("vell_reefs.csv")), read_gazetteer(_demo("vell_reefs.gpkg"))
    for region in ("Vell Mor Lagoon", "Tarrin Barrier", "Osk Shoals"):
        a, b = from_csv.match(region), from_gpkg.match(region)
        assert a.wkt is not None and shapely.from_wkt(a.wkt).equals(shapely.from_wkt(b.wkt))
        assert_allclose([a.lat, a.lon, a.precision_km], [b.lat, b.lon, b.precision_km], rtol=0, atol=1e-12)
        # a region's precision is the radius of its equal-area circle (pyproj Geod reference),
        # kilometres, not the 11 m that four written decimals of its point would imply
        area, _ = Geod(ellps="WGS84").geometry_area_perimeter(shapely.from_wkt(a.wkt))
        assert_allclose(a.precision_km, math.sqrt(abs(area) / math.pi) / 1000, rtol=1e-12)
        assert a.precision_km > 5.0


def test_aliases_find_the_place_in_csv_and_geopackage_alike() -> None:
    for path in (_demo("vell_reefs.csv"), _demo("vell_reefs.gpkg")):
        g = read_gazetteer(path)
        m = g.match("Amberlet")
        assert (m.name, m.method, m.flags) == ("Amberlet Reef", "exact", ())
        assert "by its alias 'Amberlet'" in m.notes[0]
        assert_allclose([m.lat, m.lon], [-8.223, -117.0309], rtol=0, atol=1e-9)
        assert g.match("kestle").name == "Kestle Reef"  # an alias, ignoring case


def test_aliases_cell_holds_several_names_and_wkt_points_without_coordinates() -> None:
    df = pd.DataFrame({
        "name": ["Halden Rock", "Mossy Flat"],
        "aliases": ["Halden; the Rock | Halden Pinnacle", ""],
        "wkt": ["POINT (160.2 -12.5)", "POLYGON ((160 -9, 160.1 -9, 160.1 -8.9, 160 -8.9, 160 -9))"],
    })  # fmt: skip
    g = read_gazetteer(df)
    for alias in ("Halden", "the Rock", "Halden Pinnacle"):
        assert g.match(alias).name == "Halden Rock"
    rock = g.match("Halden Rock")
    assert_allclose([rock.lat, rock.lon], [-12.5, 160.2], rtol=0, atol=1e-12)
    assert rock.wkt is None and math.isnan(rock.precision_km)  # as a GeoPackage point
    assert shapely.from_wkt(g.match("Mossy Flat").wkt).geom_type == "Polygon"
    assert g.names == ["Halden Rock", "Mossy Flat"]


def test_an_alias_shared_by_two_places_is_ambiguous() -> None:
    df = pd.DataFrame({"name": ["North Bank", "South Bank"], "aliases": ["the Bank", "the Bank"],
                       "lat": ["-8", "-9"], "lon": ["160", "160"]})  # fmt: skip
    m = read_gazetteer(df).match("the Bank")
    assert m.name is None and m.flags == ("ambiguous_site_name",)


def test_bad_wkt_in_a_csv_gazetteer_names_the_row_and_column() -> None:
    df = pd.DataFrame({"name": ["Fenn Reef"], "wkt": ["POLYGON ((1 2, 3"]})
    with pytest.raises(InputError, match=r"row 1 \(site 'Fenn Reef'\): column 'wkt' holds .* not WKT"):
        read_gazetteer(df)
