"""Coordinate text to WGS84 decimal degrees, with the precision the text implies and QA flags.

Three entry points share one reader:

- :func:`parse_coordinates` for both coordinates in one cell (``12.5S 45.2W``,
  ``(−7.3, 151.9)``, ``118.2E 6.4S``, ``-3,75; 140,2``, ``+1230-04512/``);
- :func:`parse_lat_lon` for separate latitude and longitude columns;
- :func:`parse_angle` for one angle of a known axis.

Policies (see ``docs/locate-coordinates.md``): hemisphere letters (or ``lat``/``lon``
labels) decide which value is which; without them a pair is latitude first, and is
swapped and flagged ``swapped_lat_lon`` only when unambiguous (``|first| > 90`` and
``|second| <= 90``); unlettered longitudes in [180, 360] are moved to [-180, 180) and
flagged ``lon_0_360``. ``precision_km`` is one unit of the last written digit in km of
latitude arc on the mean sphere (1° = 111.195 km), the coarser axis for a pair.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Literal

from envlink.locate._coordforms import (
    COORDINATE_ERRORS,
    COORDINATE_FLAGS,
    KM_PER_DEGREE,
    Angle,
    CoordinateError,
    Unreadable,
    normalise,
    read_angle,
    read_iso6709,
)

__all__ = [
    "COORDINATE_ERRORS",
    "COORDINATE_FLAGS",
    "KM_PER_DEGREE",
    "Coordinate",
    "CoordinateError",
    "parse_coordinates",
    "parse_lat_lon",
    "parse_angle",
]

Axis = Literal["lat", "lon"]


@dataclass(frozen=True)
class Coordinate:
    """A validated point read from text.

    Attributes
    ----------
    lat : float
        WGS84 latitude in decimal degrees, in [-90, 90].
    lon : float
        WGS84 longitude in decimal degrees, in [-180, 180).
    precision_km : float
        Precision the text implies: one unit of the last written digit, in km of
        latitude arc (the coarser of the two axes).
    flags : tuple of str
        QA codes, e.g. ``("swapped_lat_lon",)`` or ``("lon_0_360",)``; empty when the
        text was read as written.
    """

    lat: float
    lon: float
    precision_km: float
    flags: tuple[str, ...] = ()


def _fmt(value: float) -> str:
    return repr(round(value, 6) + 0.0)


def _text_of(value: object, field: str) -> str:
    """Accept str (and, leniently, int/float) input; blanks become missing_coordinate."""
    if isinstance(value, bool) or not isinstance(value, str | int | float):
        raise CoordinateError(
            field, f"expected text or a number, got {type(value).__name__}", "unreadable_coordinate"
        )
    if isinstance(value, float) and math.isnan(value):
        raise CoordinateError(field, "the value is missing (NaN)", "missing_coordinate")
    text = value if isinstance(value, str) else repr(value)
    if not text.strip():
        raise CoordinateError(field, "the value is empty", "missing_coordinate", text)
    return text


def _finish_lat(angle: Angle) -> float:
    if angle.axis == "lon":
        raise CoordinateError(
            "lat", f"{angle.text!r} has the east-west letter {angle.letter} but is a latitude",
            "wrong_axis_letter",
        )
    value = angle.value
    if abs(value) > 90.0:
        raise CoordinateError(
            "lat", f"latitude {_fmt(value)} is beyond ±90", "lat_out_of_range"
        )
    return value


def _finish_lon(angle: Angle) -> tuple[float, tuple[str, ...]]:
    if angle.axis == "lat":
        raise CoordinateError(
            "lon", f"{angle.text!r} has the north-south letter {angle.letter} but is a longitude",
            "wrong_axis_letter",
        )
    value = angle.value
    if angle.letter is not None:
        if angle.magnitude > 180.0:
            raise CoordinateError(
                "lon", f"longitude {_fmt(angle.magnitude)} {angle.letter} is beyond 180",
                "lon_out_of_range",
            )
        return (-180.0 if value == 180.0 else value), ()
    if value < -180.0:
        raise CoordinateError(
            "lon", f"longitude {_fmt(value)} is beyond -180", "lon_out_of_range"
        )
    if value > 360.0:
        raise CoordinateError(
            "lon", f"longitude {_fmt(value)} is beyond 360", "lon_out_of_range"
        )
    if value >= 180.0:
        return value - 360.0, ("lon_0_360",)
    return value, ()


def _unlettered_swap(first: Angle, second: Angle) -> bool:
    return first.letter is None and second.letter is None and (
        abs(first.value) > 90.0 and abs(second.value) <= 90.0
    )


def _assemble(a: Angle, b: Angle, axes: tuple[Axis, Axis] | None = None) -> Coordinate:
    """Decide which angle is the latitude (labels, then letters, then order) and validate."""
    flags: list[str] = []
    ax_a, ax_b = axes if axes is not None else (a.axis, b.axis)
    if ax_a is not None and ax_a == ax_b:
        kind = "north-south (latitudes)" if ax_a == "lat" else "east-west (longitudes)"
        raise CoordinateError(
            "coords", f"both {a.text!r} and {b.text!r} have {kind} letters", "wrong_axis_letter"
        )
    if ax_a is None and ax_b is None:
        if _unlettered_swap(a, b):
            a, b = b, a
            flags.append("swapped_lat_lon")
        lat_angle, lon_angle = a, b
    elif ax_a == "lon" or ax_b == "lat":
        lat_angle, lon_angle = b, a
    else:
        lat_angle, lon_angle = a, b
    lat = _finish_lat(lat_angle)
    lon, lon_flags = _finish_lon(lon_angle)
    precision = max(lat_angle.precision_km, lon_angle.precision_km)
    return Coordinate(lat, lon, precision, tuple(flags) + lon_flags)


# --- both coordinates in one cell -------------------------------------------------------

_BRACKETS = re.compile(r"^[(\[{<]\s*(.*?)\s*[)\]}>]$")
_LABEL = re.compile(
    r"(?<![a-z])(?P<name>latitude|lat|longitude|long|lon|lng)(?![a-z])\.?[ ]*[:=]?[ ]*", re.I
)
_HEMI_CHAR = re.compile(r"(?<![a-z])(?:north|south|east|west|[nsew])(?![a-z])", re.I)


def _split_candidates(s: str) -> list[list[tuple[str, str]]]:
    """Ways to cut ``s`` into two angle texts, grouped in tiers from most to least explicit."""

    def cut_at(positions: list[int], skip: int) -> list[tuple[str, str]]:
        return [(s[:i].strip(), s[i + skip :].strip()) for i in positions]

    explicit = [i for i, c in enumerate(s) if c in ";/|"]
    commas = [m.start() for m in re.finditer(r",", s)]
    loose_commas = [i for i in commas if not (0 < i < len(s) - 1 and s[i - 1].isdigit()
                                               and s[i + 1].isdigit())]
    decimal_commas = [i for i in commas if i not in loose_commas]
    spaces = [i for i, c in enumerate(s) if c == " "]
    # " - " may be a separator or a minus sign: offer both readings, so that a pair
    # where the two differ is reported as ambiguous instead of guessed
    spaced_dashes = [i for i in range(1, len(s) - 1) if s[i - 1 : i + 2] == " - "]
    joins: list[int] = []
    for m in _HEMI_CHAR.finditer(s):
        joins.extend(i for i in (m.start(), m.end()) if 0 < i < len(s) and s[i] != " "
                     and s[i - 1] != " ")
    joins.extend(m.start() for m in re.finditer(r"(?<=[0-9°'\"])[+-]", s))
    return [
        cut_at(explicit, 1),
        cut_at(loose_commas, 1),
        cut_at(spaces, 1) + cut_at(spaced_dashes, 1),
        cut_at(decimal_commas, 1),
        cut_at(sorted(set(joins)), 0),
    ]


def _try_split(first: str, second: str) -> Coordinate | CoordinateError | None:
    """A Coordinate, a CoordinateError for a readable but impossible pair, or None."""
    if not first or not second:
        return None
    try:
        return _assemble(read_angle(first, "lat"), read_angle(second, "lon"))
    except Unreadable:
        return None
    except CoordinateError as err:
        return err


def _by_labels(s: str) -> Coordinate | None:
    labels = list(_LABEL.finditer(s))
    if not labels:
        return None
    names = ["lat" if m.group("name").lower().startswith("lat") else "lon" for m in labels]
    if len(labels) != 2 or labels[0].start() != 0 or sorted(names) != ["lat", "lon"]:
        raise Unreadable("coords", "expected one 'lat' and one 'lon' label, each before its value")
    first = s[labels[0].end() : labels[1].start()].strip(" ,;/|")
    second = s[labels[1].end() :].strip()
    axes: tuple[Axis, Axis] = ("lat", "lon") if names[0] == "lat" else ("lon", "lat")
    return _assemble(read_angle(first, axes[0]), read_angle(second, axes[1]), axes)


#: OGC Simple Features WKT point, x (longitude) first, optionally EWKT ``SRID=4326;``
_WKT_POINT = re.compile(
    r"^(?:srid=4326;)?\s*point\s*(?:z|m|zm)?\s*\(\s*(\S+)\s+(\S+)(?:\s+\S+){0,2}\s*\)$", re.I
)


def _parse_pair(s: str) -> Coordinate:
    wkt = _WKT_POINT.match(s)
    if wkt:  # the order is fixed (x = lon, y = lat): read by labels, never swapped
        s = f"lat {wkt.group(2)} lon {wkt.group(1)}"
    iso = read_iso6709(s)
    if iso is not None:
        lat_angle, lon_angle, extra = iso
        lat = _finish_lat(lat_angle)
        lon, lon_flags = _finish_lon(lon_angle)
        precision = max(lat_angle.precision_km, lon_angle.precision_km)
        return Coordinate(lat, lon, precision, extra + lon_flags)
    m = _BRACKETS.match(s)
    if m:
        s = m.group(1)
    if s.endswith("/") and s.count("/") == 1:
        s = s[:-1].rstrip()  # a signed pair ended ISO-style but not in ISO 6709 digits
    labelled = _by_labels(s)
    if labelled is not None:
        return labelled
    for tier in _split_candidates(s):
        found: dict[Coordinate, tuple[str, str]] = {}
        errors: list[CoordinateError] = []
        for a, b in tier:
            outcome = _try_split(a, b)
            if isinstance(outcome, Coordinate):
                found.setdefault(outcome, (a, b))
            elif outcome is not None:
                errors.append(outcome)
        if len(found) == 1:
            return next(iter(found))
        if len(found) > 1:
            readings = " or ".join(
                f"{a!r} + {b!r} = ({c.lat:.6g}, {c.lon:.6g})" for c, (a, b) in found.items()
            )
            raise CoordinateError(
                "coords",
                f"the text splits into two coordinates in more than one way: {readings}; "
                "add a separator (',' or ';'), symbols (° ' \") or hemisphere letters",
                "ambiguous_coordinate",
            )
        if errors:
            raise errors[0]
    try:
        read_angle(s, "coords")
    except CoordinateError:
        pass
    else:
        raise Unreadable("coords", "found one coordinate where both latitude and longitude "
                         "were expected", "one_coordinate_only")
    raise Unreadable(
        "coords", "not a coordinate pair in any accepted form (e.g. '12.5S 45.2W', "
        "'-12.5, -45.2', '12°30′S 45°12′W', '+1230-04512/')",
    )


def parse_coordinates(text: str) -> Coordinate:
    """Read both coordinates written in one cell.

    Parameters
    ----------
    text : str
        Decimal degrees (signed, or with hemisphere letters or words before or after),
        degrees-minutes(-seconds) with ``°'"`` or look-alikes, colons, spaces or hyphens,
        comma decimals, any dash as minus, optional brackets and ``lat``/``lon`` labels,
        an ISO 6709 string such as ``+1230-04512/``, or a WKT point
        ``POINT (lon lat)`` (x first, as envlink's ``site_wkt`` writes it).

    Returns
    -------
    Coordinate
        Latitude, longitude in [-180, 180), precision in km and QA flags.

    Raises
    ------
    CoordinateError
        With ``field``, ``reason`` and ``code`` (e.g. ``lat_out_of_range``,
        ``sign_contradicts_hemisphere``, ``wrong_axis_letter``, ``minutes_ge_60``,
        ``ambiguous_coordinate``, ``unreadable_coordinate``, ``missing_coordinate``).

    Examples
    --------
    >>> parse_coordinates("12.5S 45.2W")
    Coordinate(lat=-12.5, lon=-45.2, precision_km=11.119508..., flags=())
    >>> c = parse_coordinates("118.2E 6.4S")
    >>> c.lat, c.lon, c.flags
    (-6.4, 118.2, ())
    >>> parse_coordinates("151.9, -7.3").flags
    ('swapped_lat_lon',)
    >>> parse_coordinates("-7.3, 210.0").lon, parse_coordinates("-7.3, 210.0").flags
    (-150.0, ('lon_0_360',))
    >>> c = parse_coordinates("POINT (-117.2 -8.5)")
    >>> c.lat, c.lon
    (-8.5, -117.2)
    """
    raw = _text_of(text, "coords")
    try:
        return _parse_pair(normalise(raw))
    except CoordinateError as err:
        err.text = raw
        raise


def parse_lat_lon(lat_text: str, lon_text: str) -> Coordinate:
    """Read a latitude and a longitude given in separate fields.

    Each field takes any one-angle form of :func:`parse_coordinates`; numbers given as
    ``int``/``float`` are accepted too. Letters must belong to the field's axis; when
    both fields carry the other axis's letter the error suggests the swapped pair.
    Without letters, ``|lat| > 90`` with ``|lon| <= 90`` is swapped and flagged
    ``swapped_lat_lon``.

    Examples
    --------
    >>> parse_lat_lon("12°30'S", "45°12'W")
    Coordinate(lat=-12.5, lon=-45.2, precision_km=1.853251..., flags=())
    >>> parse_lat_lon("151.9", "-7.3").flags
    ('swapped_lat_lon',)
    """
    raw_lat = _text_of(lat_text, "lat")
    raw_lon = _text_of(lon_text, "lon")
    shown = f"{raw_lat} | {raw_lon}"
    try:
        a = read_angle(normalise(raw_lat), "lat")
        b = read_angle(normalise(raw_lon), "lon")
        if a.axis == "lon" and b.axis == "lat":
            c = _assemble(a, b)
            raise CoordinateError(
                "coords",
                f"the latitude field holds an east-west value ({a.text!r}) and the longitude "
                f"field a north-south one ({b.text!r}); the columns look swapped: did you mean "
                f"lat={_fmt(c.lat)}, lon={_fmt(c.lon)}?",
                "swapped_lat_lon_suggested",
            )
        if _unlettered_swap(a, b):
            c = _assemble(b, a, ("lat", "lon"))
            return Coordinate(c.lat, c.lon, c.precision_km, ("swapped_lat_lon", *c.flags))
        return _assemble(a, b, ("lat", "lon"))
    except CoordinateError as err:
        if not err.text:
            err.text = shown
        raise


def parse_angle(text: str, axis: Axis) -> tuple[float, float]:
    """Read one angle of a known axis.

    Parameters
    ----------
    text : str
        One angle in any form accepted by :func:`parse_coordinates`.
    axis : {"lat", "lon"}
        Which axis the text is; a hemisphere letter of the other axis is an error.

    Returns
    -------
    (float, float)
        Signed decimal degrees (longitudes moved into [-180, 180)) and the precision in
        km. Use :func:`parse_lat_lon` to also receive the ``lon_0_360`` flag.

    Examples
    --------
    >>> parse_angle("12°30.5′S", "lat")
    (-12.508333333333333, 0.18532513...)
    >>> parse_angle("-45,2", "lon")
    (-45.2, 11.119508...)
    """
    if axis not in ("lat", "lon"):
        from envlink.errors import param_error

        raise param_error("axis", "parse_angle", "'lat' or 'lon'", axis)
    raw = _text_of(text, axis)
    try:
        angle = read_angle(normalise(raw), axis)
        if axis == "lat":
            return _finish_lat(angle), angle.precision_km
        return _finish_lon(angle)[0], angle.precision_km
    except CoordinateError as err:
        err.text = raw
        raise
