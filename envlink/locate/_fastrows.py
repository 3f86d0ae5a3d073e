"""Vectorised reading of the common cell forms of the locate stage: plain decimal degrees and ISO dates.

Private to :mod:`envlink.locate.sites`. A table of 100,000 rows with every coordinate
and date distinct costs a Python parse per cell on the general path (about 0.1 ms a
row); most tables write plain decimal degrees (``-8.25``, ``+151.5``) and ISO 8601
dates (``2011-06-15``, ``2011-06``, ``2011``). These functions read those forms for a
whole column at once with Arrow kernels and say, row by row, whether they did. A row
is taken here only when its result is a clean one (no flag: in range, not swapped,
not across 180°, the end not before the start); every other row goes through the
per-cell parsers, so the odd forms keep their exact values, flags and messages.
The values equal those of the per-cell parsers bit for bit (tests/locate/test_fastrows.py).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from envlink.locate._coordforms import KM_PER_DEGREE

#: a plain decimal angle: optional sign, digits with an optional fraction (or ``.5``),
#: optional spaces or tabs around it; no exponent, no decimal comma, no letters
_DECIMAL = r"^[ \t]*(?P<sign>[+-]?)(?P<num>[0-9]+(?:\.[0-9]+)?|\.[0-9]+)[ \t]*$"
#: an ISO 8601 calendar date, reduced or not: ``YYYY-MM-DD``, ``YYYY-MM``, ``YYYY``
_ISO_DATE = r"^[ \t]*(?P<y>[0-9]{4})(?:-(?P<m>[0-9]{2})(?:-(?P<d>[0-9]{2}))?)?[ \t]*$"
_MONTH_DAYS = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)
#: precision words in the order of ``envlink.locate._periodtext.UNIT_RANK``
_UNITS = np.array(["day", "month", "year"], dtype=object)


def _groups(texts: Sequence[str], pattern: str) -> tuple[np.ndarray, pa.StructArray]:
    """Which texts match ``pattern`` (a bool array) and the named groups of each."""
    arr = pa.array(texts, type=pa.string())
    found = pc.extract_regex(arr, pattern=pattern)
    ok = np.asarray(found.is_valid().to_numpy(zero_copy_only=False), dtype=bool)
    return ok, found


def _field(found: pa.StructArray, name: str) -> pa.Array:
    return pc.fill_null(pc.struct_field(found, name), "")


def _angles(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Plain decimal angles: (matched, signed value, precision in km)."""
    ok, found = _groups(texts, _DECIMAL)
    num = _field(found, "num")
    num = pc.if_else(pa.array(ok), num, "0")
    magnitude = pc.cast(num, pa.float64()).to_numpy(zero_copy_only=False)
    negative = np.asarray(pc.equal(_field(found, "sign"), "-").to_numpy(zero_copy_only=False), dtype=bool)
    value = np.where(negative, -magnitude, magnitude) + 0.0  # -0 reads as 0.0, as the parser does
    dot = pc.find_substring(num, ".").to_numpy(zero_copy_only=False).astype(np.int64)
    length = pc.utf8_length(num).to_numpy(zero_copy_only=False).astype(np.int64)
    decimals = np.where(dot >= 0, length - dot - 1, 0)
    # the parser's own expression per distinct number of decimals, so the floats are equal
    table = np.array([KM_PER_DEGREE * 10.0**-d for d in range(int(decimals.max(initial=0)) + 1)])
    return ok, value, table[decimals]


def fast_lat_lon(lat: Sequence[str], lon: Sequence[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Read separate latitude and longitude texts written as plain decimal degrees.

    Returns ``(taken, lat, lon, precision_km)``: ``taken`` is True where both texts are
    plain decimals with ``|lat| <= 90`` and ``-180 <= lon < 180`` (the rows the
    per-cell parser reads without a flag); the other entries are meaningful there only.

    Examples
    --------
    >>> taken, la, lo, km = fast_lat_lon(["-8.5", "12°30'S", "95"], [" +160.25", "45", "10"])
    >>> taken.tolist(), float(la[0]), float(lo[0]), round(float(km[0]), 4)
    ([True, False, False], -8.5, 160.25, 11.1195)
    """
    ok_a, lat_v, lat_km = _angles(lat)
    ok_b, lon_v, lon_km = _angles(lon)
    with np.errstate(invalid="ignore"):
        taken = ok_a & ok_b & (np.abs(lat_v) <= 90.0) & (lon_v >= -180.0) & (lon_v < 180.0)
    return taken, lat_v, lon_v, np.maximum(lat_km, lon_km)


class _Dates:
    """ISO dates of one column: matched, the first and last day as text, the unit rank."""

    def __init__(self, texts: Sequence[str]) -> None:
        ok, found = _groups(texts, _ISO_DATE)
        y_text, m_text, d_text = (_field(found, k) for k in ("y", "m", "d"))
        year = self._ints(y_text)
        month, day = self._ints(m_text), self._ints(d_text)
        has_m, has_d = month > 0, day > 0
        leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
        last = _MONTH_DAYS[np.clip(month, 0, 12)] + ((month == 2) & leap)
        valid = (year >= 1) & (~has_m | (month <= 12))
        valid &= (pc.utf8_length(m_text).to_numpy(zero_copy_only=False) == 0) | has_m
        valid &= (pc.utf8_length(d_text).to_numpy(zero_copy_only=False) == 0) | (has_d & (day <= last))
        self.ok = ok & valid
        self.rank = np.where(has_d, 0, np.where(has_m, 1, 2))
        self.year = year
        mm = np.where(has_m, month, 1)
        self.first = self._iso(y_text, mm, np.where(has_d, day, 1))
        last_m = np.where(has_m, month, 12)
        self.last = self._iso(y_text, last_m, np.where(has_d, day, np.where(has_m, last, 31)))

    @staticmethod
    def _ints(text: pa.Array) -> np.ndarray:
        digits = pc.if_else(pc.equal(text, ""), "0", text)
        return pc.cast(digits, pa.int64()).to_numpy(zero_copy_only=False).astype(np.int64)

    @staticmethod
    def _iso(year: pa.Array, month: np.ndarray, day: np.ndarray) -> np.ndarray:
        def two(v: np.ndarray) -> pa.Array:
            return pc.utf8_lpad(pc.cast(pa.array(v), pa.string()), width=2, padding="0")

        joined = pc.binary_join_element_wise(year, two(month), two(day), "-")
        return np.asarray(joined.to_numpy(zero_copy_only=False), dtype=object)


def fast_periods(start: Sequence[str], end: Sequence[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Read start and end texts written as ISO 8601 dates (``YYYY-MM-DD``, ``YYYY-MM``, ``YYYY``).

    Returns ``(taken, first, last, precision)``: ``taken`` is True where both texts are
    such dates, valid in the calendar, and the end's last day is not before the start's
    first day; ``first`` and ``last`` are the window's ISO dates and ``precision`` the
    coarser unit (``'years'`` for a year window over several years).

    Examples
    --------
    >>> taken, first, last, unit = fast_periods(["2011-03", "2011", "5 May 2011"], ["2011-06-15", "2013", "2012"])
    >>> taken.tolist(), first[:2].tolist(), last[:2].tolist(), unit[:2].tolist()
    ([True, True, False], ['2011-03-01', '2011-01-01'], ['2011-06-15', '2013-12-31'], ['month', 'years'])
    """
    a, b = _Dates(start), _Dates(end)
    rank = np.maximum(a.rank, b.rank)
    unit = _UNITS[rank].copy()
    unit[(rank == 2) & (a.year != b.year)] = "years"
    taken = a.ok & b.ok
    taken[taken] = a.first[taken] <= b.last[taken]
    return taken, a.first, b.last, unit


def fast_period(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Read one-cell periods written as one ISO 8601 date (``YYYY-MM-DD``, ``YYYY-MM``, ``YYYY``).

    Returns ``(taken, first, last, precision)`` as :func:`fast_periods` does.

    Examples
    --------
    >>> taken, first, last, unit = fast_period(["2012-02", "summer 2010"])
    >>> taken.tolist(), first[0], last[0], unit[0]
    ([True, False], '2012-02-01', '2012-02-29', 'month')
    """
    d = _Dates(texts)
    return d.ok, d.first, d.last, _UNITS[d.rank].copy()
