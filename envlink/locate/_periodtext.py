"""Text helpers of the period reader: normalising, date forms as written, ISO 8601 durations.

Private to :mod:`envlink.locate.periods`. A *point* is one date as written, possibly
partial (``"3"`` or ``"Jul"`` inside a range); :func:`read_point` recognises the form
and :func:`point_window` validates it into the inclusive window of days it covers.
"""

from __future__ import annotations

import calendar
import datetime as dt
import re
import unicodedata
from dataclasses import dataclass, replace
from typing import Literal

from envlink.core.util import INVISIBLE_CHARS as _INVISIBLE
from envlink.errors import FieldError

Unit = Literal["day", "month", "year"]
Precision = Literal["day", "month", "season", "year", "years"]
Order = Literal["dayfirst", "monthfirst"]

UNIT_RANK = {"day": 0, "month": 1, "season": 2, "year": 3, "years": 4}

MONTH_NAMES = tuple(calendar.month_name[1:])
MONTH_ABBR = tuple(calendar.month_abbr[1:])


class PeriodError(FieldError):
    """A period text that cannot be used, with the field, a reason and a QA code.

    Attributes
    ----------
    field : str
        ``"period"`` (one cell holding the whole period), ``"start"`` or ``"end"``
        (separate start and end columns).
    reason : str
        Short human reason naming the offending value, e.g.
        ``"2011-02-29 is not a date: 2011 is not a leap year"``.
    code : str
        Short lower-case QA code: ``"unreadable_period"``, ``"impossible_date"``,
        ``"end_before_start"``, ``"season_needs_mapping"`` or ``"season_year_mismatch"``.
    text : str
        The text that was given.

    Examples
    --------
    >>> err = PeriodError("period", "month 13 does not exist", "impossible_date", "2011-13")
    >>> str(err)
    "Cannot read period '2011-13': month 13 does not exist [impossible_date]."
    """


@dataclass(frozen=True)
class Period:
    """A reported period as an inclusive window of days.

    Attributes
    ----------
    start, end : datetime.date or None
        First and last day of the window, both inclusive. ``None`` when the text is
        readable but does not resolve to one window (see ``flags`` and ``notes``).
    precision : {'day', 'month', 'season', 'year', 'years'} or None
        The unit the text was written in (docs/locate-periods.md): a day or day range is
        ``'day'``; a month or whole-month range ``'month'``; a season ``'season'``; one
        calendar year ``'year'``; a range over several years ``'years'``. Kept for
        unresolved periods too (``05/06/2011`` is ``'day'`` even before the order is known).
    flags : tuple of str
        QA codes, e.g. ``('ambiguous_day_month',)``, ``('season_by_hemisphere',)``.
    notes : tuple of str
        Human sentences explaining the flags (e.g. the two possible readings).

    Examples
    --------
    >>> Period(dt.date(2011, 3, 1), dt.date(2011, 3, 31), "month", ())
    Period(start=datetime.date(2011, 3, 1), end=datetime.date(2011, 3, 31), precision='month', flags=(), notes=())
    """

    start: dt.date | None
    end: dt.date | None
    precision: Precision | None
    flags: tuple[str, ...]
    notes: tuple[str, ...] = ()


class NeedsOrder(Exception):
    """Internal: a numeric date whose day/month order the text does not decide."""


# ---------------------------------------------------------------- normalising

#: zero-width space / joiners, word joiner, BOM, soft hyphen, direction marks
_DASHES = dict.fromkeys(map(ord, "\u2010\u2011\u2012\u2013\u2014\u2015\u2212\ufe58\ufe63\uff0d"), "-")
_MONTH_WORDS = {name.lower(): i for i, name in enumerate(MONTH_NAMES, 1)}
_MONTH_WORDS.update({abbr.lower(): i for i, abbr in enumerate(MONTH_ABBR, 1)})
_MONTH_WORDS["sept"] = 9
_MONTH_RE = re.compile(
    r"\b(" + "|".join(sorted(_MONTH_WORDS, key=len, reverse=True)) + r")\b\.?"
)


def normalise(text: str) -> str:
    """Lower-case, unify dashes and spaces, and write month names as ``M01``..``M12``.

    >>> normalise("  Sept. 3rd – 9th, 2011 ")
    'M09 3-9 2011'
    """
    out = unicodedata.normalize("NFKC", text).translate(_DASHES).translate(_INVISIBLE).strip().lower()
    out = out.replace(",", " ")
    out = re.sub(r"(?<=\d)(?:st|nd|rd|th)\b", "", out)
    out = _MONTH_RE.sub(lambda m: f"M{_MONTH_WORDS[m.group(1)]:02d}", out)
    out = re.sub(r"\s+", " ", out).strip()
    if out.startswith("between ") and " and " in out:
        out = out[len("between ") :].replace(" and ", " - ", 1)
    out = re.sub(r"^from ", "", out)
    out = re.sub(r" (?:to|until|till|through|thru) ", " - ", out)
    out = re.sub(r" ?- ?", "-", out)
    out = re.sub(r" ?/ ?", "/", out)
    return out


# ---------------------------------------------------------------- points as written


@dataclass(frozen=True)
class Point:
    """One date as written; fields may be missing inside ranges."""

    year: int | None = None
    month: int | None = None
    day: int | None = None
    span: tuple[dt.date, dt.date] | None = None  # forms complete by construction (week, ordinal)
    time: tuple[int, int, float] | None = None

    @property
    def unit(self) -> Unit:
        if self.span is not None or self.day is not None:
            return "day"
        return "month" if self.month is not None else "year"


_TIME = r"(?:[t ](?P<h>\d{2})(?::?(?P<mi>\d{2})(?::?(?P<s>\d{2}(?:[.,]\d+)?))?)?(?:z|[+-]\d{2}(?::?\d{2})?)?)?"
_NUM_TIME = r"(?: (?P<h>\d{1,2}):(?P<mi>\d{2})(?::(?P<s>\d{2}))?)?"
_SEP = r"[ .\-]?"

_ISO_FORMS = [
    ("ymd", re.compile(r"(?P<y>\d{4})-(?P<m>\d{2})-(?P<d>\d{2})" + _TIME)),
    ("ymd", re.compile(r"(?P<y>\d{4})(?P<m>\d{2})(?P<d>\d{2})" + _TIME)),
    ("week", re.compile(r"(?P<y>\d{4})-?w(?P<w>\d{2})(?:-?(?P<wd>\d))?")),
    ("ordinal", re.compile(r"(?P<y>\d{4})-?(?P<o>\d{3})")),
    ("ym", re.compile(r"(?P<y>\d{4})-(?P<m>\d{2})")),
    ("y", re.compile(r"(?P<y>\d{4})")),
]
_OTHER_FORMS = [
    ("ymd", re.compile(r"(?P<y>\d{4})(?P<sep>[/.\-])(?P<m>\d{1,2})(?P=sep)(?P<d>\d{1,2})")),
    ("ym", re.compile(r"(?P<y>\d{4})-(?P<m>\d)")),
    ("numeric", re.compile(r"(?P<a>\d{1,2})(?P<sep>[/.\-])(?P<b>\d{1,2})(?P=sep)(?P<y>\d{4})" + _NUM_TIME)),
    ("ym", re.compile(r"(?P<m>\d{1,2})[/.\-](?P<y>\d{4})")),
    ("ymd", re.compile(r"(?P<d>\d{1,2})" + _SEP + r"M(?P<m>\d\d)(?:" + _SEP + r"(?P<y>\d{4}))?")),
    ("ymd", re.compile(r"M(?P<m>\d\d)" + _SEP + r"(?P<d>\d{1,2})(?:" + _SEP + r"(?P<y>\d{4}))?")),
    ("ym", re.compile(r"M(?P<m>\d\d)(?:" + _SEP + r"(?P<y>\d{4}))?")),
    ("ymd", re.compile(r"(?P<y>\d{4})" + _SEP + r"M(?P<m>\d\d)(?:" + _SEP + r"(?P<d>\d{1,2}))?")),
]
_PARTIAL_FORMS = [
    ("ymd", re.compile(r"(?P<d>\d{1,2})")),
    ("ymd", re.compile(r"(?P<d>\d{1,2}) (?P<y>\d{4})")),
]
TWO_DIGIT_YEAR = re.compile(r"\d{1,2}([/.\-])\d{1,2}\1\d{2}|\d{1,2}" + _SEP + r"M\d\d" + _SEP + r"\d{2}")


def _int(match: re.Match[str], name: str) -> int | None:
    value = match.group(name) if name in match.re.groupindex else None
    return None if value is None else int(value)


def _time_of(match: re.Match[str], text: str, field: str) -> tuple[int, int, float] | None:
    if "h" not in match.re.groupindex or match.group("h") is None:
        return None
    h = int(match.group("h"))
    mi = int(match.group("mi") or 0)
    s = float((match.group("s") or "0").replace(",", "."))
    if h > 24 or mi > 59 or s >= 61 or (h == 24 and (mi or s)):
        raise PeriodError(field, f"the time {h:02d}:{mi:02d} does not exist", "impossible_date", text)
    return (h, mi, s)


def read_point(
    norm: str, *, order: Order | None, text: str, field: str, partial: bool = False, iso_only: bool = False
) -> Point | None:
    """Recognise one date as written (``None`` when the text is no date form).

    Raises :class:`NeedsOrder` for a numeric day/month date the text does not decide.
    """
    forms = _ISO_FORMS if iso_only else _ISO_FORMS + _OTHER_FORMS + (_PARTIAL_FORMS if partial else [])
    for kind, pattern in forms:
        m = pattern.fullmatch(norm)
        if m is None:
            continue
        year = _int(m, "y")
        if kind in ("week", "ordinal") and (year is None or year < 1):
            raise PeriodError(field, f"year {year} is outside the calendar (years run 1-9999)",
                              "impossible_date", text)
        if kind == "week":
            return Point(year=year, span=_week_span(int(m.group("y")), int(m.group("w")), _int(m, "wd"), text, field))
        if kind == "ordinal":
            return Point(year=year, span=_ordinal_span(int(m.group("y")), int(m.group("o")), text, field))
        if kind == "numeric":
            a, b = int(m.group("a")), int(m.group("b"))
            if order is None:
                if a <= 12 and b <= 12 and a != b:
                    raise NeedsOrder
                order = "monthfirst" if b > 12 else "dayfirst"
            day, month = (a, b) if order == "dayfirst" else (b, a)
            if month > 12 and day <= 12:
                raise PeriodError(
                    field,
                    f"month {month} does not exist when read {'day' if order == 'dayfirst' else 'month'}"
                    f" first (order={order!r}); the other order would read it as day {month} of month {day}",
                    "impossible_date", text,
                )
            return Point(year=year, month=month, day=day, time=_time_of(m, text, field))
        point = Point(year=year, month=_int(m, "m"), day=_int(m, "d"), time=_time_of(m, text, field))
        if point.year is None and not partial:
            return None
        return point
    return None


def _week_span(year: int, week: int, weekday: int | None, text: str, field: str) -> tuple[dt.date, dt.date]:
    try:
        first = dt.date.fromisocalendar(year, week, weekday or 1)
    except ValueError:
        weeks = dt.date(year, 12, 28).isocalendar()[1] if 1 <= year <= 9999 else 0
        what = f"week {week} of {year} does not exist ({year} has {weeks} ISO weeks)"
        if weekday is not None and not 1 <= weekday <= 7:
            what = f"weekday {weekday} does not exist (ISO weekdays run 1-7)"
        raise PeriodError(field, what, "impossible_date", text) from None
    return (first, first) if weekday else (first, first + dt.timedelta(days=6))


def _ordinal_span(year: int, ordinal: int, text: str, field: str) -> tuple[dt.date, dt.date]:
    days = 366 if calendar.isleap(year) else 365
    if not 1 <= ordinal <= days or year < 1:
        raise PeriodError(field, f"day {ordinal} of {year} does not exist ({year} has {days} days)",
                          "impossible_date", text)
    day = dt.date(year, 1, 1) + dt.timedelta(days=ordinal - 1)
    return (day, day)


def check_date(year: int, month: int, day: int, text: str, field: str) -> dt.date:
    """Return the date or raise ``impossible_date`` naming the value and the reason."""
    if year < 1:
        raise PeriodError(field, f"year {year} is outside the calendar (years run 1-9999)", "impossible_date", text)
    if not 1 <= month <= 12:
        raise PeriodError(field, f"month {month} does not exist (months run 1-12)", "impossible_date", text)
    length = calendar.monthrange(year, month)[1]
    if not 1 <= day <= length:
        iso = f"{year:04d}-{month:02d}-{day:02d}"
        if month == 2 and day == 29:
            reason = f"{iso} is not a date: {year} is not a leap year"
        elif day > 31 or day < 1:
            reason = f"{iso} is not a date: day {day} does not exist (days run 1-31)"
        else:
            reason = f"{iso} is not a date: {MONTH_NAMES[month - 1]} {year} has {length} days"
        raise PeriodError(field, reason, "impossible_date", text)
    return dt.date(year, month, day)


def point_window(point: Point, text: str, field: str) -> tuple[dt.date, dt.date]:
    """Inclusive first and last day a complete point covers."""
    if point.span is not None:
        return point.span
    assert point.year is not None  # complete points have a year
    if point.day is not None:
        day = check_date(point.year, point.month or 0, point.day, text, field)
        return day, day
    if point.month is not None:
        first = check_date(point.year, point.month, 1, text, field)
        return first, month_end(first)
    first = check_date(point.year, 1, 1, text, field)
    return first, dt.date(point.year, 12, 31)


def month_end(day: dt.date) -> dt.date:
    """Last day of the month of ``day``."""
    return day.replace(day=calendar.monthrange(day.year, day.month)[1])


def fill(left: Point, right: Point) -> tuple[Point, Point] | None:
    """Give the two ends of a written range the fields one of them left out.

    ``3-9 March 2011``: the start takes the month and year of the end;
    ``March 3-9, 2011`` or ``2011-03-05-09``: the end takes them from the start.
    """
    if left.year is None:
        left = replace(left, year=right.year)
    if right.year is None:
        right = replace(right, year=left.year)
    if left.span is None and left.day is not None and left.month is None and right.span is None:
        left = replace(left, month=right.month)
    if right.span is None and right.day is not None and right.month is None and left.span is None:
        right = replace(right, month=left.month)
    for p in (left, right):
        if p.year is None or (p.span is None and p.day is not None and p.month is None):
            return None
    return left, right


# ---------------------------------------------------------------- ISO 8601 durations


@dataclass(frozen=True)
class Duration:
    """An ISO 8601 duration ``PnYnMnWnDTnHnMnS`` (whole numbers except seconds)."""

    years: int = 0
    months: int = 0
    weeks: int = 0
    days: int = 0
    seconds: float = 0.0

    @property
    def unit(self) -> Unit:
        if self.weeks or self.days or self.seconds:
            return "day"
        return "month" if self.months else "year"


_DURATION = re.compile(
    r"p(?:(?P<Y>\d+)y)?(?:(?P<M>\d+)m)?(?:(?P<W>\d+)w)?(?:(?P<D>\d+)d)?"
    r"(?:t(?:(?P<H>\d+)h)?(?:(?P<TM>\d+)m)?(?:(?P<S>\d+(?:[.,]\d+)?)s)?)?"
)


def read_duration(norm: str, text: str, field: str) -> Duration | None:
    """Read ``P3M``, ``P1Y2M10DT2H30M``, ``P4W`` (lower-cased); ``None`` if not one."""
    if not norm.startswith("p"):
        return None
    m = _DURATION.fullmatch(norm)
    if m is None or norm in ("p", "pt") or norm.endswith("t"):
        if re.fullmatch(r"p[\d.,ymwdths]+", norm) and re.search(r"\d[.,]\d", norm):
            raise PeriodError(field, f"{text.strip()!r}: only the seconds of a duration may have decimals",
                              "unreadable_period", text)
        return None
    g = {k: v for k, v in m.groupdict().items() if v is not None}
    seconds = int(g.get("H", 0)) * 3600 + int(g.get("TM", 0)) * 60 + float(g.get("S", "0").replace(",", "."))
    return Duration(int(g.get("Y", 0)), int(g.get("M", 0)), int(g.get("W", 0)), int(g.get("D", 0)), seconds)


def shift(instant: dt.datetime, duration: Duration, sign: int) -> dt.datetime:
    """Move an instant by a duration: years and months first (day clipped to the month's
    length), then weeks, days and time (common practice, as in XML Schema's algorithm)."""
    months = instant.year * 12 + instant.month - 1 + sign * (duration.years * 12 + duration.months)
    year, month = divmod(months, 12)
    month += 1
    day = min(instant.day, calendar.monthrange(year, month)[1]) if 1 <= year <= 9999 else instant.day
    moved = instant.replace(year=year, month=month, day=day)
    delta = dt.timedelta(weeks=duration.weeks, days=duration.days, seconds=duration.seconds)
    return moved + delta if sign > 0 else moved - delta


def instant_of(point: Point, first: dt.date, last: dt.date, *, at_end: bool) -> dt.datetime:
    """The instant a point marks: its time if written, else the start of its first day
    (``at_end=False``) or the end of its last day (``at_end=True``)."""
    if point.time is not None:
        h, mi, s = point.time
        return dt.datetime.combine(first, dt.time()) + dt.timedelta(hours=h, minutes=mi, seconds=s)
    if at_end:
        return dt.datetime.combine(last, dt.time()) + dt.timedelta(days=1)
    return dt.datetime.combine(first, dt.time())


def last_day_before(end: dt.datetime, start: dt.datetime) -> dt.date:
    """Inclusive last day of the span ``[start, end)`` (or the day of ``end`` when it has a time)."""
    if end > start and end.time() == dt.time():
        return (end - dt.timedelta(days=1)).date()
    return end.date()
