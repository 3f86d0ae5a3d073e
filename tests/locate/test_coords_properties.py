"""Property tests: random points written in every accepted form parse back within rounding.

The writers below are independent of envlink: they format with Python's own ``format``
and integer arithmetic (D + M/60 + S/3600, carrying rounded seconds into minutes and
degrees), the way a person or a spreadsheet writes coordinates (common practice).
The expected precision is one unit of the last written digit in km of latitude arc on
the IUGG mean sphere, R1 = 6371.0088 km (Moritz 2000, J. Geodesy 74:128).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from envlink.locate.coords import (
    COORDINATE_ERRORS,
    COORDINATE_FLAGS,
    CoordinateError,
    parse_angle,
    parse_coordinates,
    parse_lat_lon,
)

DEG = 6371.0088 * math.pi / 180.0  # Moritz (2000) mean radius; km per degree of arc
UNIT_KM = (DEG, DEG / 60.0, DEG / 3600.0)
SETTINGS = settings(max_examples=150, deadline=None, derandomize=True)

# symbol sets for DMS: (degree, minute, second); look-alikes people paste from papers
SYMBOL_SETS = [
    ("°", "'", '"'),
    ("\u00ba", "\u2019", "\u201d"),  # masculine ordinal, right curly quotes
    ("\u02da", "\u2032", "\u2033"),  # ring above, prime, double prime
    ("°", "\u2018", "\u201c"),  # left curly quotes
    ("°", "'", "''"),  # two single quotes for seconds
    (" deg ", "'", '"'),  # the word deg
    ("\u00b0", "\u2032", "\u2032\u2032"),  # two primes for seconds
]
MINUS_SIGNS = ["-", "\u2212", "\u2013", "\u2014"]  # hyphen-minus, minus, en and em dash

lat_values = st.floats(min_value=-90.0, max_value=90.0, allow_nan=False)
# away from the antimeridian so rounding cannot carry 179.99 to 180 (tested separately)
lon_values = st.floats(min_value=-179.0, max_value=179.0, allow_nan=False)


class Written:
    """An angle's text plus what it promises: rounding bound and precision."""

    def __init__(self, text: str, tol: float, precision: float, letter: str | None) -> None:
        self.text, self.tol, self.precision = text, tol, precision
        self.letter = letter  # where the hemisphere letter is: "before", "after" or None

    @property
    def lettered(self) -> bool:
        return self.letter is not None


def _hemi(value: float, axis: str) -> str:
    return ("S" if value < 0 else "N") if axis == "lat" else ("W" if value < 0 else "E")


def _split_units(value: float, parts: int, decimals: int) -> tuple[bool, list[int], int]:
    """Round |value| to `decimals` of its last part (deg/min/sec), carrying upward."""
    scale = 10**decimals
    per_degree = (1, 60, 3600)[parts - 1] * scale
    total = round(abs(value) * per_degree)
    negative = value < 0 and total > 0
    if parts == 1:
        return negative, [total // scale], total % scale
    if parts == 2:
        deg, rest = divmod(total, 60 * scale)
        return negative, [deg, rest // scale], rest % scale
    deg, rest = divmod(total, 3600 * scale)
    minutes, rest = divmod(rest, 60 * scale)
    return negative, [deg, minutes, rest // scale], rest % scale


def _last(whole: int, frac: int, decimals: int, width: int = 0) -> str:
    text = f"{whole:0{width}d}"
    return f"{text}.{frac:0{decimals}d}" if decimals else text


@st.composite
def written_angle(draw: st.DrawFn, value: float, axis: str) -> Written:
    """Write `value` in one randomly chosen single-angle form."""
    form = draw(st.sampled_from(
        ["signed", "letter_after", "letter_before", "word", "dms_symbols", "dm_symbols",
         "colon", "hyphen", "space_lettered"]
    ))
    parts = {"signed": 1, "letter_after": 1, "letter_before": 1, "word": 1,
             "dm_symbols": 2}.get(form, draw(st.sampled_from([2, 3])))
    decimals = draw(st.integers(0, 6 if parts == 1 else 3))
    negative, units, frac = _split_units(value, parts, decimals)
    if form == "dms_symbols":
        parts = 3
    tol = 0.5 / (1, 60, 3600)[parts - 1] / 10**decimals + 1e-9
    precision = UNIT_KM[parts - 1] * 10.0**-decimals
    hemi = _hemi(-1.0 if negative else 1.0, axis)
    if draw(st.booleans()):
        hemi = hemi.lower()
    minus = draw(st.sampled_from(MINUS_SIGNS))
    comma = draw(st.booleans())
    sign = minus if negative else draw(st.sampled_from(["", "+"]))

    def number(text: str) -> str:
        return text.replace(".", ",") if comma else text

    if parts == 1:
        body = number(_last(units[0], frac, decimals))
        if form == "signed":
            return Written(sign + body + draw(st.sampled_from(["", "°", "\u00ba"])), tol,
                           precision, None)
        if form == "letter_after":
            return Written(body + draw(st.sampled_from(["", " ", "°", "° "])) + hemi, tol,
                           precision, "after")
        if form == "letter_before":
            return Written(hemi + draw(st.sampled_from(["", " "])) + body, tol, precision,
                           "before")
        word = {"N": "north", "S": "south", "E": "east", "W": "west"}[hemi.upper()]
        word = draw(st.sampled_from([word, word.capitalize(), word.upper()]))
        if draw(st.booleans()):
            return Written(f"{body} {word}", tol, precision, "after")
        return Written(f"{word} {body}", tol, precision, "before")
    if form in ("dms_symbols", "dm_symbols"):
        if form == "dms_symbols" and len(units) == 2:
            # redraw as DMS when the sampled part count was 2
            negative, units, frac = _split_units(value, 3, decimals)
            hemi = _hemi(-1.0 if negative else 1.0, axis)
        symbols = draw(st.sampled_from(SYMBOL_SETS))
        space = draw(st.sampled_from(["", " "]))
        pieces = [f"{units[0]}{symbols[0]}"]
        for i, u in enumerate(units[1:-1], start=1):
            pieces.append(f"{u:02d}{symbols[i]}")
        pieces.append(number(_last(units[-1], frac, decimals, 2)) + symbols[len(units) - 1])
        body = space.join(pieces)
        if draw(st.booleans()):
            return Written(body + space + hemi, tol, precision, "after")
        return Written(hemi + space + body, tol, precision, "before")
    joiner = {"colon": ":", "hyphen": "-", "space_lettered": " "}[form]
    pieces = [str(units[0])] + [f"{u:02d}" for u in units[1:-1]]
    pieces.append(number(_last(units[-1], frac, decimals, 2)))
    body = joiner.join(pieces)
    if form == "space_lettered":
        return Written(f"{body} {hemi}", tol, precision, "after")
    return Written(minus + body if negative else body, tol, precision, None)


def _lon_error(got: float, expected: float) -> float:
    return abs((got - expected + 180.0) % 360.0 - 180.0)


@SETTINGS
@given(data=st.data(), lat=lat_values)
def test_one_latitude_round_trips(data: st.DataObject, lat: float) -> None:
    w = data.draw(written_angle(lat, "lat"))
    value, precision = parse_angle(w.text, "lat")
    assert abs(value - lat) <= w.tol, w.text
    assert_allclose(precision, w.precision, rtol=1e-12)


@SETTINGS
@given(data=st.data(), lon=lon_values)
def test_one_longitude_round_trips(data: st.DataObject, lon: float) -> None:
    w = data.draw(written_angle(lon, "lon"))
    value, precision = parse_angle(w.text, "lon")
    assert _lon_error(value, lon) <= w.tol, w.text
    assert_allclose(precision, w.precision, rtol=1e-12)


@SETTINGS
@given(data=st.data(), lat=lat_values, lon=lon_values)
def test_separate_columns_round_trip(data: st.DataObject, lat: float, lon: float) -> None:
    a = data.draw(written_angle(lat, "lat"))
    b = data.draw(written_angle(lon, "lon"))
    got = parse_lat_lon(a.text, b.text)
    assert abs(got.lat - lat) <= a.tol and _lon_error(got.lon, lon) <= b.tol, (a.text, b.text)
    assert_allclose(got.precision_km, max(a.precision, b.precision), rtol=1e-12)
    assert got.flags == ()


def _pair_text(data: st.DataObject, a: Written, b: Written) -> str:
    separators = [", ", "; ", " ; ", " / "]
    # a bare comma between two digits would read as a decimal comma
    if not any("," in t for t in (a.text, b.text)) and not (
        a.text[-1].isdigit() and b.text[0].isdigit()
    ):
        separators.append(",")
    # a bare space is unambiguous between single numbers, or when letters mark the ends
    # (not "prefix-lettered, then suffix-lettered": N 12 30 45 12 W splits two ways)
    if (a.lettered and b.lettered and (a.letter, b.letter) != ("before", "after")) or all(
        " " not in t for t in (a.text, b.text)
    ):
        separators.append(" ")
    text = a.text + data.draw(st.sampled_from(separators)) + b.text
    opener, closer = data.draw(st.sampled_from([("", ""), ("(", ")"), ("[", "]")]))
    return opener + text + closer


@SETTINGS
@given(data=st.data(), lat=lat_values, lon=lon_values)
def test_one_cell_pair_round_trips(data: st.DataObject, lat: float, lon: float) -> None:
    a = data.draw(written_angle(lat, "lat"))
    b = data.draw(written_angle(lon, "lon"))
    first, second = (b, a) if (a.lettered and b.lettered and data.draw(st.booleans())) else (a, b)
    text = _pair_text(data, first, second)
    got = parse_coordinates(text)
    assert abs(got.lat - lat) <= a.tol and _lon_error(got.lon, lon) <= b.tol, text
    assert_allclose(got.precision_km, max(a.precision, b.precision), rtol=1e-12)
    assert got.flags == (), text


def _iso_part(value: float, degree_digits: int, parts: int, decimals: int) -> str:
    negative, units, frac = _split_units(value, parts, decimals)
    digits = f"{units[0]:0{degree_digits}d}" + "".join(f"{u:02d}" for u in units[1:])
    if decimals:
        digits += f".{frac:0{decimals}d}"
    return ("-" if negative else "+") + digits


@SETTINGS
@given(lat=lat_values, lon=lon_values, parts=st.integers(1, 3), decimals=st.integers(0, 4),
       extra=st.sampled_from(["/", "", "+12.5/", "-3CRSWGS_84/", "CRSWGS_84/"]))
def test_iso6709_round_trips(lat: float, lon: float, parts: int, decimals: int,
                             extra: str) -> None:
    # ISO 6709:2008 Annex H layout (from memory): ±DD[MM[SS]][.f] ±DDD[MM[SS]][.f] [alt] [CRS] /
    text = _iso_part(lat, 2, parts, decimals) + _iso_part(lon, 3, parts, decimals) + extra
    got = parse_coordinates(text)
    tol = 0.5 / (1, 60, 3600)[parts - 1] / 10**decimals + 1e-9
    assert abs(got.lat - lat) <= tol and _lon_error(got.lon, lon) <= tol, text
    assert_allclose(got.precision_km, UNIT_KM[parts - 1] * 10.0**-decimals, rtol=1e-12)


@SETTINGS
@given(lat=lat_values, lon=st.floats(-180.0, 180.0, exclude_max=True), n=st.integers(0, 5),
       writer=st.sampled_from(["pair", "columns"]))
def test_longitudes_0_360_are_moved_and_flagged(lat: float, lon: float, n: int,
                                                writer: str) -> None:
    east = lon % 360.0  # the 0-360 convention (common practice)
    lat_text, lon_text = f"{lat:.{n}f}", f"{east:.{n}f}"
    if writer == "pair":
        got = parse_coordinates(f"{lat_text}, {lon_text}")
    else:
        got = parse_lat_lon(lat_text, lon_text)
    tol = 0.5 * 10.0**-n + 1e-9
    assert -180.0 <= got.lon < 180.0
    assert _lon_error(got.lon, lon) <= tol and abs(got.lat - lat) <= tol
    assert got.flags == (("lon_0_360",) if float(lon_text) >= 180.0 else ())


@SETTINGS
@given(lat=lat_values, lon=st.floats(90.0, 180.0, exclude_min=True, exclude_max=True),
       west=st.booleans(), n=st.integers(0, 5),
       call=st.sampled_from([
           lambda a, b: parse_coordinates(f"{a}, {b}"),
           lambda a, b: parse_coordinates(f"{a} {b}"),
           lambda a, b: parse_lat_lon(a, b),
       ]))
def test_unambiguous_swaps_are_swapped_and_flagged(
    lat: float, lon: float, west: bool, n: int, call: Callable
) -> None:
    lon = -lon if west else lon
    lon_text, lat_text = f"{lon:.{n}f}", f"{lat:.{n}f}"
    if abs(float(lon_text)) <= 90.0 or abs(float(lon_text)) >= 180.0:
        return  # rounding moved it out of the unambiguous band
    got = call(lon_text, lat_text)  # longitude written first, no letters
    tol = 0.5 * 10.0**-n + 1e-9
    assert abs(got.lat - lat) <= tol and abs(got.lon - lon) <= tol
    assert got.flags == ("swapped_lat_lon",)


_ALPHABET = st.sampled_from(list("0123456789.,;:/ +-NSEWnsewlatoCR°'\"()[]") + [
    "\u2212", "\u2013", "\u2032", "\u2033", "\u00ba", "''", "deg", "north", "lat ", "lon ",
])


@SETTINGS
@given(pieces=st.lists(_ALPHABET, max_size=24))
def test_any_text_gives_a_valid_point_or_a_coordinate_error(pieces: list[str]) -> None:
    # no input may escape as another exception (a traceback for a CLI user) or a bad value
    text = "".join(pieces)
    for call in (lambda: parse_coordinates(text), lambda: parse_lat_lon(text, text)):
        try:
            got = call()
        except CoordinateError as err:
            assert err.code in COORDINATE_ERRORS and err.field in ("lat", "lon", "coords")
            assert err.reason and err.code in str(err)
        else:
            assert -90.0 <= got.lat <= 90.0 and -180.0 <= got.lon < 180.0
            assert math.isfinite(got.precision_km) and got.precision_km > 0
            assert set(got.flags) <= set(COORDINATE_FLAGS)


def _dms(value: float, symbols: tuple[str, str, str], decimals: int) -> str:
    _, (d, m, s), frac = _split_units(value, 3, decimals)
    return f"{d}{symbols[0]}{m:02d}{symbols[1]}{_last(s, frac, decimals, 2)}{symbols[2]}"


@pytest.mark.parametrize("symbols", SYMBOL_SETS, ids=repr)
@pytest.mark.parametrize("minus", MINUS_SIGNS, ids=ascii)
@settings(max_examples=25, deadline=None, derandomize=True)
@given(lat=lat_values, lon=lon_values, decimals=st.integers(0, 3))
def test_every_symbol_set_and_minus_sign(
    symbols: tuple[str, str, str], minus: str, lat: float, lon: float, decimals: int
) -> None:
    # each look-alike set, signed with each dash, and lettered: both must read back
    signed = ", ".join(
        (minus if v < 0 else "") + _dms(v, symbols, decimals) for v in (lat, lon)
    )
    lettered = f"{_dms(lat, symbols, decimals)}{_hemi(lat, 'lat')} " \
        f"{_dms(lon, symbols, decimals)}{_hemi(lon, 'lon')}"
    tol = 0.5 / 3600 / 10**decimals + 1e-9
    for text in (signed, lettered):
        got = parse_coordinates(text)
        assert abs(got.lat - lat) <= tol and _lon_error(got.lon, lon) <= tol, text
        assert_allclose(got.precision_km, UNIT_KM[2] * 10.0**-decimals, rtol=1e-12)
