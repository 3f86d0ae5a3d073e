"""Text forms of one coordinate: symbol look-alikes, one angle, and ISO 6709 strings.

This private module turns the text of *one* angle (``12°30'S``, ``-12,5``,
``N 12 30.5``) into an :class:`Angle` that still remembers how it was written
(hemisphere letter, sign, precision). Deciding which angle is the latitude, and
checking ranges, is the job of :mod:`envlink.locate.coords`.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass
from decimal import Decimal

from envlink.core.earth import KM_PER_DEG
from envlink.core.util import INVISIBLE_CHARS as _INVISIBLE
from envlink.errors import FieldError

__all__ = [
    "COORDINATE_ERRORS",
    "COORDINATE_FLAGS",
    "KM_PER_DEGREE",
    "Angle",
    "CoordinateError",
    "Unreadable",
    "normalise",
    "read_angle",
    "read_iso6709",
]

#: QA flags set on a Coordinate that was read (the value is used), in plain words
COORDINATE_FLAGS: dict[str, str] = {
    "swapped_lat_lon": "latitude and longitude were written the other way round and were swapped",
    "lon_0_360": "the longitude was written in 0-360 and was moved to [-180, 180)",
    "crs_not_wgs84": "the ISO 6709 string names a CRS other than WGS 84; taken as WGS 84",
}

#: codes of CoordinateError (the value is rejected), in plain words
COORDINATE_ERRORS: dict[str, str] = {
    "missing_coordinate": "the coordinate is empty",
    "unreadable_coordinate": "the text is not a coordinate in any accepted form",
    "one_coordinate_only": "one coordinate found where both were expected",
    "ambiguous_coordinate": "the text can be read as two different pairs; none was chosen",
    "lat_out_of_range": "the latitude is beyond ±90",
    "lon_out_of_range": "the longitude is beyond -180..360 (or beyond 180 with a letter)",
    "sign_contradicts_hemisphere": "a sign contradicts the hemisphere letter",
    "wrong_axis_letter": "a hemisphere letter belongs to the other axis",
    "swapped_lat_lon_suggested": "the latitude and longitude columns look exchanged",
    "minutes_ge_60": "minutes are 60 or more",
    "seconds_ge_60": "seconds are 60 or more",
    "negative_minutes": "minutes carry a minus sign",
    "negative_seconds": "seconds carry a minus sign",
}

#: one degree of latitude arc on the IUGG mean sphere, in km (:mod:`envlink.core.earth`)
KM_PER_DEGREE = KM_PER_DEG
#: size in km of one whole degree, minute and second of latitude arc
_UNIT_KM = (KM_PER_DEGREE, KM_PER_DEGREE / 60.0, KM_PER_DEGREE / 3600.0)
_UNIT_NAMES = ("degrees", "minutes", "seconds")
_UNIT_SYMBOLS = ("°", "'", '"')


class CoordinateError(FieldError):
    """A coordinate text that cannot be used, with the field, a reason and a QA code.

    Attributes
    ----------
    field : str
        ``"lat"``, ``"lon"`` or ``"coords"`` (both coordinates, or which one is unknown).
    reason : str
        Short human reason, naming the offending value.
    code : str
        Short lower-case QA code, e.g. ``"lat_out_of_range"``.
    text : str
        The text that was given.

    Examples
    --------
    >>> err = CoordinateError("lat", "latitude 95.0 is beyond ±90", "lat_out_of_range", "95")
    >>> str(err)
    "Cannot read lat '95': latitude 95.0 is beyond ±90 [lat_out_of_range]."
    """


class Unreadable(CoordinateError):
    """The text is not written in any accepted form (as opposed to an impossible value)."""

    def __init__(self, field: str, reason: str, code: str = "unreadable_coordinate",
                 text: str = "") -> None:
        super().__init__(field, reason, code, text)


@dataclass(frozen=True)
class Angle:
    """One angle as written: unsigned size, sign, hemisphere letter and precision."""

    magnitude: float  # decimal degrees, >= 0
    negative: bool  # south / west, or a minus sign
    letter: str | None  # "N", "S", "E", "W" or None
    precision_km: float
    text: str  # the (normalised) text of this angle

    @property
    def value(self) -> float:
        """Signed decimal degrees (0.0, never -0.0, for zero)."""
        return (-self.magnitude if self.negative else self.magnitude) + 0.0

    @property
    def axis(self) -> str | None:
        """``"lat"`` or ``"lon"`` from the hemisphere letter, else None."""
        if self.letter is None:
            return None
        return "lat" if self.letter in "NS" else "lon"


# --- normalisation ---------------------------------------------------------------------

_CHAR_MAP = str.maketrans(
    {
        # degree look-alikes: masculine ordinal, ring above, ring operator, superscripts
        "\u00ba": "°", "\u02da": "°", "\u2218": "°", "\u2070": "°", "\u1d52": "°",
        # minute look-alikes: prime, curly single quotes, acute, modifier primes, backtick
        "\u2032": "'", "\u2019": "'", "\u2018": "'", "\u00b4": "'", "\u02b9": "'",
        "\u02bc": "'", "\u201b": "'", "\u2035": "'", "`": "'",
        # second look-alikes: double prime, curly double quotes, double acute
        "\u2033": '"', "\u201d": '"', "\u201c": '"', "\u02ba": '"', "\u02dd": '"',
        "\u2036": '"', "\u201e": '"', "\u201f": '"',
        # minus look-alikes: minus sign, hyphens, figure/en/em dashes, small/full-width
        "\u2212": "-", "\u2010": "-", "\u2011": "-", "\u2012": "-", "\u2013": "-",
        "\u2014": "-", "\u2015": "-", "\ufe58": "-", "\ufe63": "-", "\uff0d": "-",
        "\uff0b": "+", "\ufe62": "+", "\uff0c": ",", "\uff1b": ";", "\uff1a": ":",
        "\uff0e": ".", "\uff08": "(", "\uff09": ")",
    }
)  # fmt: skip
_WORD_UNITS = (
    (re.compile(r"[ ]*(?<![a-z])deg(?:rees?|s)?(?![a-z])\.?", re.I), "°"),
    (re.compile(r"[ ]*(?<![a-z])min(?:utes?|s)?(?![a-z])\.?", re.I), "'"),
    (re.compile(r"[ ]*(?<![a-z])sec(?:onds?|s)?(?![a-z])\.?", re.I), '"'),
)
_SPACES = re.compile(r"\s+")
#: zero-width space / joiners, word joiner, BOM, soft hyphen, direction marks


def normalise(text: str) -> str:
    """Map look-alike symbols, dashes, digits and spaces to one plain ASCII spelling.

    Degrees become ``°``, minutes ``'``, seconds ``"`` (also from two single quotes
    ``''`` and the words ``deg``/``min``/``sec``), every dash or minus becomes ``-``,
    non-ASCII decimal digits become ASCII and runs of white space one space.

    Examples
    --------
    >>> normalise("  12º 30′ 15″ S ")
    '12° 30\\' 15" S'
    >>> normalise("\u22127,5 deg")
    '-7,5°'
    """
    s = text.translate(_CHAR_MAP).translate(_INVISIBLE)
    if not s.isascii():
        s = "".join(
            str(unicodedata.decimal(c)) if unicodedata.decimal(c, None) is not None else c
            for c in s
        )
    s = _SPACES.sub(" ", s).strip()
    for pattern, symbol in _WORD_UNITS:
        s = pattern.sub(symbol, s)
    s = s.replace("''", '"')
    # a space between a number and its unit symbol carries no meaning
    return re.sub(r" (?=[°'\"])", "", s)


# --- one angle ---------------------------------------------------------------------------

_HEMI = r"(north|south|east|west|[nsew])"
_PREFIX = re.compile(rf"^{_HEMI}(?![a-z])\.?[ ]*", re.I)
_SUFFIX = re.compile(rf"[ ]*(?<![a-z]){_HEMI}\.?$", re.I)
_SIGN = re.compile(r"([+-])[ ]*")
_EXPONENT = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)[eE][+-]?[0-9]+")
_COMP = re.compile(r"(?P<num>[0-9]+(?:[.,][0-9]+)?|\.[0-9]+)(?P<unit>[°'\"])?")
_SEP = re.compile(r"(?P<pre>[ ]*)(?P<ch>[:-]?)(?P<post>[ ]*)")


def _letter(word: str) -> str:
    return word[0].upper()


def _components(body: str, field: str) -> list[tuple[str, str | None]]:
    """Split ``12°30'15.5"`` / ``12 30 15.5`` / ``12:30`` / ``12-30`` into parts."""
    m = _COMP.match(body)
    if not m:
        raise Unreadable(field, f"no number where one was expected in {body!r}")
    parts = [(m.group("num"), m.group("unit"))]
    pos = m.end()
    while pos < len(body):
        sep = _SEP.match(body, pos)
        assert sep is not None  # the separator pattern matches the empty string
        pre, ch, post = sep.group("pre"), sep.group("ch"), sep.group("post")
        if not (pre or ch or parts[-1][1]):
            raise Unreadable(field, f"unexpected {body[pos]!r} in {body!r}")
        m = _COMP.match(body, sep.end())
        if not m:
            rest = body[sep.end():]
            if not rest:  # the text ends in a separator: '8.5-', '12:'
                raise Unreadable(field, f"{body!r} ends in {sep.group(0).strip()!r} with no number after it")
            raise Unreadable(field, f"unexpected {rest!r} in {body!r}")
        if len(parts) == 3:
            raise Unreadable(field, f"more than three parts (degrees, minutes, seconds) in {body!r}")
        if ch == "-" and pre and not post:
            name = _UNIT_NAMES[len(parts)]
            raise CoordinateError(
                field, f"{name} -{m.group('num')} are negative; only the degrees may carry a sign",
                f"negative_{name}",
            )
        parts.append((m.group("num"), m.group("unit")))
        pos = m.end()
    return parts


def read_angle(text: str, field: str) -> Angle:
    """Read one normalised angle: decimal degrees, DM or DMS, with optional letter or sign.

    Parameters
    ----------
    text : str
        Output of :func:`normalise` for one angle.
    field : str
        Field named in errors when the hemisphere letter does not say the axis.

    Raises
    ------
    Unreadable
        The text is in no accepted form.
    CoordinateError
        A readable text with an impossible part (minutes >= 60, a sign contradicting
        the letter, negative minutes).

    Examples
    --------
    >>> a = read_angle("12°30'S", "lat")
    >>> a.value, a.letter, round(a.precision_km, 3)
    (-12.5, 'S', 1.853)
    """
    s = text.strip()
    if _EXPONENT.fullmatch(s):  # 1e-05 as a program writes it: read as 0.00001
        s = format(Decimal(s), "f")
    letter = None
    m = _PREFIX.match(s)
    if m:
        letter = _letter(m.group(1))
        s = s[m.end():]
    m = _SUFFIX.search(s)
    if m:
        if letter is not None:
            raise Unreadable(field, f"two hemisphere letters in {text!r}")
        letter = _letter(m.group(1))
        s = s[: m.start()]
    if letter is not None:
        field = "lat" if letter in "NS" else "lon"
    sign = ""
    m = _SIGN.match(s)
    if m:
        sign = m.group(1)
        s = s[m.end():]
    if not s:
        raise Unreadable(field, f"no number in {text!r}")
    parts = _components(s, field)
    for i, (_, unit) in enumerate(parts):
        if unit is not None and unit != _UNIT_SYMBOLS[i]:
            raise Unreadable(
                field, f"part {i + 1} of {text!r} is marked {unit!r} but should be {_UNIT_NAMES[i]}"
            )
    numbers = [p[0].replace(",", ".") for p in parts]
    if any("." in n for n in numbers[:-1]):
        raise Unreadable(field, f"only the last part of {text!r} may have decimals")
    values = [float(n) for n in numbers]
    for i in (1, 2):
        if len(values) > i and values[i] >= 60.0:
            raise CoordinateError(
                field, f"{_UNIT_NAMES[i]} {parts[i][0]} in {text!r} must be below 60",
                f"{_UNIT_NAMES[i]}_ge_60",
            )
    if letter is not None and sign:
        if (sign == "-") != (letter in "SW"):
            raise CoordinateError(
                field, f"the sign {sign!r} contradicts the hemisphere letter {letter} in {text!r}",
                "sign_contradicts_hemisphere",
            )
    magnitude = values[0] + sum(v / 60.0**i for i, v in enumerate(values[1:], start=1))
    last = numbers[-1]
    decimals = len(last) - last.index(".") - 1 if "." in last else 0
    precision = _UNIT_KM[len(values) - 1] * 10.0**-decimals
    negative = sign == "-" or (letter is not None and letter in "SW")
    return Angle(magnitude, negative, letter, precision, text)


# --- ISO 6709 ---------------------------------------------------------------------------

_ISO = re.compile(
    r"^(?P<lat>[+-][0-9]{2}(?:[0-9]{2}){0,2}(?:\.[0-9]+)?)"
    r"(?P<lon>[+-][0-9]{3}(?:[0-9]{2}){0,2}(?:\.[0-9]+)?)"
    r"(?P<alt>[+-][0-9]+(?:\.[0-9]+)?)?"
    r"(?:CRS(?P<crs>[^/]+))?/?$"
)
#: CRS identifiers taken to mean WGS 84 (compared without case, spaces, '_', ':' or '-')
_WGS84_NAMES = {"wgs84", "epsg4326", "4326", "ogcCRS84".lower(), "crs84"}


def _iso_angle(token: str, degree_digits: int, field: str, text: str) -> Angle:
    sign, body = token[0], token[1:]
    whole, _, frac = body.partition(".")
    n = (len(whole) - degree_digits) // 2  # 0: D, 1: DM, 2: DMS
    cuts = [whole[:degree_digits]] + [
        whole[degree_digits + 2 * i : degree_digits + 2 * i + 2] for i in range(n)
    ]
    if frac:
        cuts[-1] = f"{cuts[-1]}.{frac}"
    values = [float(c) for c in cuts]
    for i in (1, 2):
        if len(values) > i and values[i] >= 60.0:
            raise CoordinateError(
                field, f"{_UNIT_NAMES[i]} {cuts[i]} in ISO 6709 {token!r} must be below 60",
                f"{_UNIT_NAMES[i]}_ge_60", text,
            )
    magnitude = values[0] + sum(v / 60.0**i for i, v in enumerate(values[1:], start=1))
    precision = _UNIT_KM[n] * 10.0 ** -len(frac)
    return Angle(magnitude, sign == "-", None, precision, token)


def read_iso6709(text: str) -> tuple[Angle, Angle, tuple[str, ...]] | None:
    """Read an ISO 6709 point string (``+DD[MM[SS]][.f]±DDD[MM[SS]][.f][±alt][CRSxxx]/``).

    Returns the latitude and longitude angles and extra QA flags (``crs_not_wgs84``
    when a CRS other than WGS 84 is named), or None when ``text`` is not in that form.
    The altitude is read and ignored.

    Examples
    --------
    >>> lat, lon, flags = read_iso6709("+1230-04512/")
    >>> lat.value, lon.value, flags
    (12.5, -45.2, ())
    """
    m = _ISO.match(text)
    if not m:
        return None
    lat = _iso_angle(m.group("lat"), 2, "lat", text)
    lon = _iso_angle(m.group("lon"), 3, "lon", text)
    flags: tuple[str, ...] = ()
    crs = m.group("crs")
    if crs is not None and re.sub(r"[\s_:\-]", "", crs).lower() not in _WGS84_NAMES:
        flags = ("crs_not_wgs84",)
    return lat, lon, flags
