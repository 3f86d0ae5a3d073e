"""Hand-written cases for envlink.locate.coords: every accepted form, flag and error code.

Expected values are worked by hand from the text (degrees + minutes/60 + seconds/3600).
Precision expectations use one degree of latitude arc on the IUGG mean sphere,
R1 = 6371.0088 km (Moritz 2000, "Geodetic Reference System 1980", J. Geodesy 74:128),
so 1° = R1·π/180 = 111.195 km, 1′ = 1.853 km, 1″ = 0.0309 km.
"""

from __future__ import annotations

import math
import pickle
import re
from pathlib import Path

import pytest
from numpy.testing import assert_allclose
from reference.iso6709 import ANNEX_H, HUMAN_FORMS

import envlink
from envlink.errors import InputError
from envlink.locate.coords import (
    COORDINATE_ERRORS,
    COORDINATE_FLAGS,
    Coordinate,
    CoordinateError,
    parse_angle,
    parse_coordinates,
    parse_lat_lon,
)

# Moritz (2000): IUGG mean Earth radius R1 = 6371.0088 km; one degree of arc in km.
DEG = 6371.0088 * math.pi / 180.0
MIN = DEG / 60.0
SEC = DEG / 3600.0

# hand-worked DMS values used below
S12_30_15 = -(12 + 30 / 60 + 15 / 3600)  # 12°30'15" S = -12.5041666...
W45_12_30 = -(45 + 12 / 60 + 30 / 3600)  # 45°12'30" W = -45.2083333...

PAIRS = [
    # (text, lat, lon, precision_km, flags)
    # signed decimals, comma + space between them (common practice)
    ("-12.5, -45.2", -12.5, -45.2, DEG / 10, ()),
    # hemisphere letters after the numbers
    ("12.5S 45.2W", -12.5, -45.2, DEG / 10, ()),
    # hemisphere letters before the numbers
    ("S12.5 W45.2", -12.5, -45.2, DEG / 10, ()),
    # lower-case letters before, with a space
    ("s 12.5 w 45.2", -12.5, -45.2, DEG / 10, ()),
    # hemisphere words after, comma between
    ("12.5 south, 45.2 west", -12.5, -45.2, DEG / 10, ()),
    # capitalised words before; precision is the coarser axis (1 decimal, not 2)
    ("North 8.25 East 115.5", 8.25, 115.5, DEG / 10, ()),
    # longitude first: the letters decide the order, no swap flag
    ("118.2E 6.4S", -6.4, 118.2, DEG / 10, ()),
    # Unicode minus sign (U+2212) inside round brackets
    ("(\u22127.3, 151.9)", -7.3, 151.9, DEG / 10, ()),
    # square brackets and a semicolon
    ("[-7.3; 151.9]", -7.3, 151.9, DEG / 10, ()),
    # comma decimals with a semicolon between the coordinates
    ("-3,75; 140,2", -3.75, 140.2, DEG / 10, ()),
    # comma decimals separated by a space only
    ("12,5 45,2", 12.5, 45.2, DEG / 10, ()),
    # signed decimals and a comma without spaces
    ("-12.5,-45.2", -12.5, -45.2, DEG / 10, ()),
    # degrees and whole minutes with ASCII ° and '
    ("12°30'S 45°12'W", -12.5, -45.2, MIN, ()),
    # DMS with prime and double prime (U+2032, U+2033)
    ("12°30\u203215\u2033S 45°12\u203230\u2033W", S12_30_15, W45_12_30, SEC, ()),
    # DMS with masculine ordinal and right curly quotes, comma between
    ("12\u00ba30\u201915\u201d S, 45\u00ba12\u201930\u201d W", S12_30_15, W45_12_30, SEC, ()),
    # DMS with ring above and left curly quotes
    ("12\u02da30\u201815\u201cS 45\u02da12\u201830\u201cW", S12_30_15, W45_12_30, SEC, ()),
    # two single quotes '' written for seconds
    ("12°30'15''S 45°12'30''W", S12_30_15, W45_12_30, SEC, ()),
    # the word 'deg' for the degree sign
    ("12 deg 30' S 45 deg 12' W", -12.5, -45.2, MIN, ()),
    # colons between the parts
    ("12:30:15S 45:12:30W", S12_30_15, W45_12_30, SEC, ()),
    # spaces between the parts; letters mark where each coordinate ends
    ("12 30 15 S 45 12 30 W", S12_30_15, W45_12_30, SEC, ()),
    # hyphens between the parts
    ("12-30-15S 45-12-30W", S12_30_15, W45_12_30, SEC, ()),
    # a leading minus followed by hyphen separators
    ("-12-30-15, -45-12-30", S12_30_15, W45_12_30, SEC, ()),
    # degrees and decimal minutes; coarser axis is 0.1 minute
    ("12°30.5'S 45°12.25'W", -(12 + 30.5 / 60), -(45 + 12.25 / 60), MIN / 10, ()),
    # decimal minutes with comma decimals and a semicolon
    ("12 30,5 S; 45 12,25 W", -(12 + 30.5 / 60), -(45 + 12.25 / 60), MIN / 10, ()),
    # ISO 6709 decimal degrees (lat 2 integer digits, lon 3)
    ("+12.5-045.2/", 12.5, -45.2, DEG / 10, ()),
    # ISO 6709 degrees and minutes
    ("+1230-04512/", 12.5, -45.2, MIN, ()),
    # ISO 6709 degrees, minutes and seconds
    ("+123000-0451200/", 12.5, -45.2, SEC, ()),
    # ISO 6709 decimal minutes
    ("+1230.5-04512.25/", 12 + 30.5 / 60, -(45 + 12.25 / 60), MIN / 10, ()),
    # ISO 6709 with a WGS 84 CRS and no altitude
    ("-0730+15154CRSWGS_84/", -7.5, 151.9, MIN, ()),
    # ISO 6709 with altitude and an EPSG code for WGS 84
    ("+12.5-045.2+350CRSEPSG:4326/", 12.5, -45.2, DEG / 10, ()),
    # ISO 6709 naming another CRS: read, but flagged
    ("+12.5-045.2CRSNAD27/", 12.5, -45.2, DEG / 10, ("crs_not_wgs84",)),
    # no letters, |first| > 90 and |second| <= 90: swapped and flagged
    ("151.9, -7.3", -7.3, 151.9, DEG / 10, ("swapped_lat_lon",)),
    # longitude in 0-360 moved to [-180, 180): 210 -> -150
    ("-7.3, 210.0", -7.3, -150.0, DEG / 10, ("lon_0_360",)),
    # exactly 180 is in [180, 360]: becomes -180, flagged
    ("-7.3, 180", -7.3, -180.0, DEG, ("lon_0_360",)),
    # 360 becomes 0
    ("-7.3, 360", -7.3, 0.0, DEG, ("lon_0_360",)),
    # swapped and 0-360 at once: lon 200.5 -> -159.5
    ("200.5, 10.25", 10.25, -159.5, DEG / 10, ("swapped_lat_lon", "lon_0_360")),
    # longitude written first with letters
    ("45.2W 12.5S", -12.5, -45.2, DEG / 10, ()),
    # one letter: the unlettered value is the other axis
    ("6.4S 118.2", -6.4, 118.2, DEG / 10, ()),
    # one letter on the second value says it is the latitude: no swap flag needed
    ("118.2, 6.4S", -6.4, 118.2, DEG / 10, ()),
    # lat/lon labels
    ("lat -12.5 lon 45.2", -12.5, 45.2, DEG / 10, ()),
    # labels in the other order decide the axes
    ("Longitude: 45.2; Latitude: -12.5", -12.5, 45.2, DEG / 10, ()),
    # labels with '='
    ("lat=12.5, lon=-45.2", 12.5, -45.2, DEG / 10, ()),
    # letters glued to the next number
    ("12.5N45.2E", 12.5, 45.2, DEG / 10, ()),
    # prefix letters glued together
    ("N12.5W45.2", 12.5, -45.2, DEG / 10, ()),
    # signed values glued (not ISO 6709: the longitude has 2 integer digits)
    ("+12.5-45.2", 12.5, -45.2, DEG / 10, ()),
    # the origin
    ("0, 0", 0.0, 0.0, DEG, ()),
    # the South Pole on the antimeridian, written with letters: W 180 is -180, no flag
    ("90S 180W", -90.0, -180.0, DEG, ()),
    # letters separated from their numbers by spaces
    ("12.5 N 45.2 E", 12.5, 45.2, DEG / 10, ()),
    # decimal degrees with degree signs and letters
    ("12.5°S 45.2°W", -12.5, -45.2, DEG / 10, ()),
    # trailing zeros count as written digits: lat 1e-5 deg, lon coarser at 0.1 deg
    ("12.50000S 45.2W", -12.5, -45.2, DEG / 10, ()),
    # whole degrees
    ("12S 45W", -12.0, -45.0, DEG, ()),
    # no-break space and padding
    ("  12.5S\u00a0 45.2W ", -12.5, -45.2, DEG / 10, ()),
    # lower-case s and e letters after, comma between
    ("12.5 s, 45.2 e", -12.5, 45.2, DEG / 10, ()),
    # mixed precision: minutes vs whole degrees -> whole degrees
    ("12°30'S, 45°W", -12.5, -45.0, DEG, ()),
    # en dash used as a minus sign
    ("\u201312.5, \u201345.2", -12.5, -45.2, DEG / 10, ()),
    # em dash used as a minus sign with a semicolon
    ("\u201412.5; \u201445.2", -12.5, -45.2, DEG / 10, ()),
    # leading zero on the longitude and spaces before the letters
    ("12.5° S, 045.2° W", -12.5, -45.2, DEG / 10, ()),
    # full-width digits
    ("\uff17.\uff15S \uff11\uff15\uff11.\uff19E", -7.5, 151.9, DEG / 10, ()),
    # degrees and minutes with spaces and letters after
    ("12 30 S 45 12 W", -12.5, -45.2, MIN, ()),
    # letters before, spaces between parts
    ("N 12 30 W 45 12", 12.5, -45.2, MIN, ()),
    # curly braces
    ("{12.5, -45.2}", 12.5, -45.2, DEG / 10, ()),
    # a slash between two signed decimals (not ISO: no sign on the first)
    ("12.5 / -45.2", 12.5, -45.2, DEG / 10, ()),
    # a comma glued between a letter and the next number
    ("12.5S,45.2W", -12.5, -45.2, DEG / 10, ()),
    # zero seconds still set the precision to seconds
    ("12°30'00\"N 045°12'00\"E", 12.5, 45.2, SEC, ()),
    # words for minutes and seconds
    ("12 deg 30 min 15 sec S, 45 deg 12 min 30 sec W", S12_30_15, W45_12_30, SEC, ()),
    # signed pair ended with '/' but a 1-digit latitude, so not ISO 6709
    ("+5-075/", 5.0, -75.0, DEG, ()),
    # ' - ' between lettered values: both readings agree, so it is read
    ("12.5S - 45.2W", -12.5, -45.2, DEG / 10, ()),
    # minus zero is plain zero
    ("-0.0, -0.0", 0.0, 0.0, DEG / 10, ()),
    # a minus sign that agrees with the S letter is accepted
    ("-12.5S 45.2E", -12.5, 45.2, DEG / 10, ()),
]


@pytest.mark.parametrize(("text", "lat", "lon", "precision", "flags"), PAIRS)
def test_parse_coordinates_cases(
    text: str, lat: float, lon: float, precision: float, flags: tuple[str, ...]
) -> None:
    got = parse_coordinates(text)
    assert isinstance(got, Coordinate)
    assert_allclose([got.lat, got.lon], [lat, lon], rtol=0, atol=1e-12)
    assert_allclose(got.precision_km, precision, rtol=1e-12)
    assert got.flags == flags
    assert -180.0 <= got.lon < 180.0


def test_no_negative_zero() -> None:
    got = parse_coordinates("-0.0, -0.0")  # IEEE -0.0 would print as '-0.0' in tables
    assert math.copysign(1.0, got.lat) == 1.0 and math.copysign(1.0, got.lon) == 1.0


ANGLES = [
    # (text, axis, value, precision_km)
    # plain decimal latitude, one decimal
    ("12.5", "lat", 12.5, DEG / 10),
    # degrees and minutes without a letter
    ("12°30'", "lat", 12.5, MIN),
    # decimal minutes with prime and a letter
    ("12°30.5\u2032S", "lat", -(12 + 30.5 / 60), MIN / 10),
    # DMS with spaces and decimal seconds
    ("12 30 15.5", "lon", 12 + 30 / 60 + 15.5 / 3600, SEC / 10),
    # prefix letter W with a space
    ("W 45.2", "lon", -45.2, DEG / 10),
    # Unicode minus with comma decimals, two decimals
    ("\u221245,25", "lon", -45.25, DEG / 100),
    # 0-360 longitude converted
    ("200", "lon", -160.0, DEG),
    # word before
    ("south 7", "lat", -7.0, DEG),
    # lower-case letter after with a space
    ("7.3 s", "lat", -7.3, DEG / 10),
    # masculine ordinal as a degree sign
    ("12\u00ba", "lat", 12.0, DEG),
    # minus then a hyphen separator
    ("-12-30", "lat", -12.5, MIN),
    # a spaced hyphen is a separator
    ("12 - 30", "lat", 12.5, MIN),
    # zero longitude
    ("0", "lon", 0.0, DEG),
    # E 180 is the antimeridian, written as -180
    ("180E", "lon", -180.0, DEG),
    # leading decimal point
    (".5", "lat", 0.5, DEG / 10),
    # exponent notation as a program writes small numbers: 1e-05 = 0.00001 (5 decimals)
    ("1e-05", "lat", 1e-05, DEG * 1e-5),
    # 'degrees' in words and an explicit plus sign
    ("+12 degrees", "lat", 12.0, DEG),
]


@pytest.mark.parametrize(("text", "axis", "value", "precision"), ANGLES)
def test_parse_angle_cases(text: str, axis: str, value: float, precision: float) -> None:
    got_value, got_precision = parse_angle(text, axis)  # type: ignore[arg-type]
    assert_allclose(got_value, value, rtol=0, atol=1e-12)
    assert_allclose(got_precision, precision, rtol=1e-12)


LAT_LON = [
    # (lat_text, lon_text, lat, lon, precision_km, flags)
    # DM with letters in both columns
    ("12°30'S", "45°12'W", -12.5, -45.2, MIN, ()),
    # comma decimals; coarser axis one decimal
    ("-12,5", "140,25", -12.5, 140.25, DEG / 10, ()),
    # columns swapped without letters: swapped and flagged
    ("151.9", "-7.3", -7.3, 151.9, DEG / 10, ("swapped_lat_lon",)),
    # 0-360 longitude column
    ("-7.3", "210", -7.3, -150.0, DEG, ("lon_0_360",)),
    # one column lettered, the other signed
    ("12.5", "45.25E", 12.5, 45.25, DEG / 10, ()),
    # a tiny float whose repr uses an exponent
    (1e-05, "45", 1e-05, 45.0, DEG, ()),
    # numbers, not text, are accepted (precision from their shortest repr; lon is coarser)
    (-7.25, 151.5, -7.25, 151.5, DEG / 10, ()),
]


@pytest.mark.parametrize(("lat_text", "lon_text", "lat", "lon", "precision", "flags"), LAT_LON)
def test_parse_lat_lon_cases(
    lat_text: str, lon_text: str, lat: float, lon: float, precision: float, flags: tuple[str, ...]
) -> None:
    got = parse_lat_lon(lat_text, lon_text)
    assert_allclose([got.lat, got.lon], [lat, lon], rtol=0, atol=1e-12)
    assert_allclose(got.precision_km, precision, rtol=1e-12)
    assert got.flags == flags


def test_public_export_and_error_hierarchy() -> None:
    assert envlink.parse_coordinates is parse_coordinates
    assert issubclass(CoordinateError, InputError) and issubclass(CoordinateError, ValueError)


def test_error_pickles_with_its_fields() -> None:
    err = CoordinateError("lat", "latitude 95.0 is beyond ±90", "lat_out_of_range", "95")
    back = pickle.loads(pickle.dumps(err))
    assert (back.field, back.reason, back.code, back.text) == ("lat", err.reason, err.code, "95")


def test_coordinate_is_frozen() -> None:
    c = parse_coordinates("1, 2")
    with pytest.raises(AttributeError):
        c.lat = 3.0  # type: ignore[misc]


# --- errors: the field, the value and the reason appear in the message ----------------

ERRORS = [
    # (function, args, code, field, fragments that must appear in the message)
    # both values beyond 90: no unambiguous swap, the latitude is impossible
    (parse_coordinates, ("95.5, 100.2",), "lat_out_of_range", "lat",
     ["lat", "95.5, 100.2", "latitude 95.5 is beyond ±90"]),
    # letters forbid a swap, so 95N is simply impossible
    (parse_coordinates, ("95N 45E",), "lat_out_of_range", "lat",
     ["latitude 95.0 is beyond ±90"]),
    # an unlettered longitude beyond 360
    (parse_coordinates, ("-12.5, 400",), "lon_out_of_range", "lon",
     ["lon", "-12.5, 400", "longitude 400.0 is beyond 360"]),
    # an unlettered longitude below -180
    (parse_coordinates, ("-12.5, -190",), "lon_out_of_range", "lon",
     ["longitude -190.0 is beyond -180"]),
    # with a W letter the longitude may not exceed 180
    (parse_coordinates, ("12.5S 190W",), "lon_out_of_range", "lon",
     ["longitude 190.0 W is beyond 180"]),
    # a minus sign contradicting N
    (parse_coordinates, ("-12.5N 45E",), "sign_contradicts_hemisphere", "lat",
     ["-12.5N 45E", "the sign '-' contradicts the hemisphere letter N"]),
    # a plus sign contradicting W
    (parse_coordinates, ("12.5S +45W",), "sign_contradicts_hemisphere", "lon",
     ["the sign '+' contradicts the hemisphere letter W"]),
    # two latitudes in one cell
    (parse_coordinates, ("12.5N 45.2N",), "wrong_axis_letter", "coords",
     ["12.5N 45.2N", "north-south"]),
    # an east-west letter on a latitude
    (parse_angle, ("12.5E", "lat"), "wrong_axis_letter", "lat",
     ["'12.5E'", "east-west letter E but is a latitude"]),
    # a north-south letter on a longitude
    (parse_angle, ("12.5N", "lon"), "wrong_axis_letter", "lon",
     ["north-south letter N but is a longitude"]),
    # minutes of 60 or more
    (parse_coordinates, ("12°75'S 45°W",), "minutes_ge_60", "lat",
     ["12°75'S 45°W", "minutes 75", "must be below 60"]),
    # seconds of 60 or more
    (parse_coordinates, ("12°30'60\"S 45°W",), "seconds_ge_60", "lat",
     ["seconds 60", "must be below 60"]),
    # 'space, hyphen, digit' after the degrees reads as negative minutes
    (parse_angle, ("12 -30", "lat"), "negative_minutes", "lat",
     ["'12 -30'", "minutes -30 are negative"]),
    # negative seconds
    (parse_angle, ("12°30' -15\"", "lat"), "negative_seconds", "lat",
     ["seconds -15 are negative"]),
    # an empty cell
    (parse_coordinates, ("",), "missing_coordinate", "coords", ["coords", "empty"]),
    # an empty latitude column
    (parse_lat_lon, ("", "45"), "missing_coordinate", "lat", ["lat", "empty"]),
    # NaN given as a number
    (parse_lat_lon, (float("nan"), "45"), "missing_coordinate", "lat", ["missing"]),
    # words, not a coordinate
    (parse_coordinates, ("near the jetty",), "unreadable_coordinate", "coords",
     ["near the jetty", "not a coordinate pair"]),
    # only one coordinate in a cell that must hold both
    (parse_coordinates, ("12.5",), "one_coordinate_only", "coords",
     ["'12.5'", "found one coordinate"]),
    # four bare numbers: three different readings, none picked
    (parse_coordinates, ("12 30 45 10",), "ambiguous_coordinate", "coords",
     ["12 30 45 10", "more than one way", "(12.5, 45.1667)"]),
    # one letter between two bare numbers could belong to either
    (parse_coordinates, ("12.5 S 45.2",), "ambiguous_coordinate", "coords",
     ["more than one way"]),
    # ' - ' between unlettered numbers: separator (12.5, 45.2) or minus (12.5, -45.2)?
    (parse_coordinates, ("12.5 - 45.2",), "ambiguous_coordinate", "coords",
     ["'12.5' + '- 45.2'", "'12.5' + '45.2'"]),
    # separate columns holding each other's letters: rejected with the swap suggested
    (parse_lat_lon, ("45.2W", "12.5S"), "swapped_lat_lon_suggested", "coords",
     ["45.2W | 12.5S", "look swapped", "lat=-12.5, lon=-45.2"]),
    # a longitude letter in the latitude column only
    (parse_lat_lon, ("45.2E", "12.5"), "wrong_axis_letter", "lat",
     ["'45.2E'", "east-west letter E"]),
    # ISO 6709 with 75 minutes
    (parse_coordinates, ("+1275-04512/",), "minutes_ge_60", "lat",
     ["+1275-04512/", "minutes 75"]),
    # decimals before the last part
    (parse_angle, ("12.5°30'", "lat"), "unreadable_coordinate", "lat",
     ["only the last part"]),
    # two hemisphere letters on one angle
    (parse_angle, ("N12.5S", "lat"), "unreadable_coordinate", "lat",
     ["two hemisphere letters"]),
    # two latitude labels
    (parse_coordinates, ("lat 12.5 lat 45",), "unreadable_coordinate", "coords",
     ["one 'lat' and one 'lon' label"]),
    # a label and a letter that disagree
    (parse_coordinates, ("lat 12.5E lon 45",), "wrong_axis_letter", "lat",
     ["'12.5E'", "east-west letter E but is a latitude"]),
    # four parts in one angle
    (parse_angle, ("12 30 15 5", "lon"), "unreadable_coordinate", "lon",
     ["more than three parts"]),
    # the seconds mark on the second part
    (parse_angle, ("12°30\"", "lat"), "unreadable_coordinate", "lat",
     ["part 2", "should be minutes"]),
    # a trailing separator with nothing after it
    (parse_angle, ("8.5-", "lat"), "unreadable_coordinate", "lat",
     ["'8.5-' ends in '-' with no number after it"]),
]


@pytest.mark.parametrize(("func", "args", "code", "field", "fragments"), ERRORS)
def test_error_messages(func, args, code, field, fragments) -> None:  # noqa: ANN001
    with pytest.raises(CoordinateError, match=re.escape(fragments[0])) as info:
        func(*args)
    err = info.value
    assert err.code == code
    assert err.field == field
    message = str(err)
    for fragment in fragments:
        assert fragment in message
    assert f"Cannot read {field}" in message and f"[{code}]" in message


def test_bad_axis_uses_the_parameter_template() -> None:
    with pytest.raises(InputError, match=r"The 'axis' parameter of parse_angle must be 'lat' or 'lon'; got 'depth'"):
        parse_angle("12.5", "depth")  # type: ignore[arg-type]


def test_non_text_input_is_rejected() -> None:
    with pytest.raises(CoordinateError, match="expected text or a number, got list"):
        parse_coordinates([12.5, 45.2])  # type: ignore[arg-type]


# --- ISO 6709 reference strings ------------------------------------------------------

_UNIT_KM = {"deg": DEG, "min": MIN, "sec": SEC}


@pytest.mark.parametrize("case", ANNEX_H + HUMAN_FORMS, ids=lambda c: c["text"])
def test_iso6709_reference(case: dict) -> None:
    # source named in tests/reference/iso6709.py beside each string (from memory)
    got = parse_coordinates(case["text"])
    assert_allclose([got.lat, got.lon], [case["lat"], case["lon"]], rtol=0, atol=1e-12)
    assert_allclose(got.precision_km, _UNIT_KM[case["unit"]] * 10.0 ** -case["decimals"],
                    rtol=1e-12)
    assert got.flags == ()


# --- every flag and code is known and documented ---------------------------------------

_DOC = Path(__file__).resolve().parents[2] / "docs" / "locate-coordinates.md"


def test_every_tested_code_and_flag_is_listed() -> None:
    assert {case[2] for case in ERRORS} <= set(COORDINATE_ERRORS)
    assert {flag for case in PAIRS for flag in case[4]} <= set(COORDINATE_FLAGS)


@pytest.mark.skipif(not _DOC.exists(), reason="docs/ not shipped with this install")
def test_docs_page_lists_every_flag_and_code() -> None:
    text = _DOC.read_text(encoding="utf-8")
    for code in [*COORDINATE_FLAGS, *COORDINATE_ERRORS]:
        assert f"`{code}`" in text, code


@pytest.mark.parametrize("text", ["POINT (-117.2 -8.5)", "point(-117.2 -8.5)", "SRID=4326;POINT Z (-117.2 -8.5 3)"])
def test_wkt_point_is_x_then_y(text: str) -> None:
    # OGC Simple Features (ISO 19125-1) WKT: a point is written x y, i.e. lon lat
    c = parse_coordinates(text)
    assert (c.lat, c.lon, c.flags) == (-8.5, -117.2, ())


def test_wkt_point_is_never_swapped() -> None:
    # the order is fixed by the standard, so lat out of range is an error, not a swap
    with pytest.raises(CoordinateError, match=r"latitude -117\.2 is beyond ±90"):
        parse_coordinates("POINT (-8.5 -117.2)")


def test_invisible_characters_are_ignored() -> None:
    # zero-width spaces and joiners, BOMs and soft hyphens come with copy-paste (common practice)
    c = parse_coordinates("\u200b-12.5,\u2060 45.2\ufeff")
    assert (c.lat, c.lon) == (-12.5, 45.2)
    assert parse_lat_lon("-12.5\u00ad", "45.2\u200d").lat == -12.5
