"""The period reader proper: tries each written form of a period in turn.

Private to :mod:`envlink.locate.periods`, which validates options and handles missing
values; :func:`read_text` reads one non-missing text into a :class:`Period`.
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Sequence
from functools import lru_cache

from envlink.locate._periodtext import (
    MONTH_ABBR,
    MONTH_NAMES,
    TWO_DIGIT_YEAR,
    UNIT_RANK,
    Duration,
    NeedsOrder,
    Order,
    Period,
    PeriodError,
    Point,
    Precision,
    check_date,
    instant_of,
    last_day_before,
    month_end,
    normalise,
    point_window,
    read_duration,
    read_point,
    shift,
)
from envlink.locate._periodtext import fill as fill_range
from envlink.locate._seasons import Hemisphere, PlainSouth, read_season


@lru_cache(maxsize=4096)
def read_text(
    raw: str, field: str, hemisphere: Hemisphere | None, order: Order | None,
    plain_south: PlainSouth, mapping: tuple[tuple[str, tuple[int, ...]], ...],
) -> Period:
    reader = _Reader(raw, field, hemisphere, plain_south, dict(mapping))
    try:
        return _read_either_order(reader, normalise(raw), order)
    except PeriodError:
        raise
    except (ValueError, OverflowError) as err:  # date arithmetic at the calendar's edges
        raise PeriodError(field, f"the dates fall outside the calendar (years 1-9999): {err}",
                          "impossible_date", raw) from None


def _read_either_order(reader: _Reader, norm: str, order: Order | None) -> Period:
    raw, field = reader.raw, reader.field
    if order is not None:
        return reader.read(norm, order)
    try:
        return reader.read(norm, None)
    except NeedsOrder:
        pass
    outcomes: dict[str, Period | PeriodError] = {}
    for each in ("dayfirst", "monthfirst"):
        try:
            outcomes[each] = reader.read(norm, each)  # type: ignore[arg-type]
        except PeriodError as err:
            outcomes[each] = err
    day, month = outcomes["dayfirst"], outcomes["monthfirst"]
    if isinstance(day, PeriodError) and isinstance(month, PeriodError):
        raise PeriodError(
            field, f"read day first: {day.reason}; read month first: {month.reason}", day.code, raw
        )
    if isinstance(day, PeriodError) or isinstance(month, PeriodError) or day == month:
        return month if isinstance(day, PeriodError) else day  # type: ignore[return-value]
    note = (f"{raw.strip()!r} reads as {_span(day)} (day first) or {_span(month)} (month first); "
            "give the order (order='dayfirst' or 'monthfirst'; --dayfirst or --monthfirst on the "
            "command line)")
    return Period(None, None, day.precision, ("ambiguous_day_month", *day.flags), (note, *day.notes))


def _span(p: Period) -> str:
    return str(p.start) if p.start == p.end else f"{p.start}..{p.end}"


def _precision(units: Sequence[str], start: dt.date, end: dt.date) -> Precision:
    finest = min(units, key=UNIT_RANK.__getitem__)
    if finest == "year":
        return "year" if start.year == end.year else "years"
    return finest  # type: ignore[return-value]


_QUALIFIER_BEFORE = re.compile(
    r"^(?:the )?(?:middle of|mid|early|late|end of|beginning of|start of|circa|ca\.?|c\.|"
    r"around|about|approximately|approx\.?|roughly|~)(?=[ \-\dM])[ \-]*(?:the )?"
)
_QUALIFIER_AFTER = re.compile(
    r"(?: \(?|\()(?:approximately|approx\.?|circa|ca\.?|est\.?|estimated|or so)\)?$|\?$"
)


def _unqualified(norm: str) -> str:
    """The text without one leading and one trailing vague qualifier."""
    return _QUALIFIER_AFTER.sub("", _QUALIFIER_BEFORE.sub("", norm, count=1), count=1).strip()


class _Reader:
    """Reads one text; ``order`` is passed per attempt so ambiguity can be explored."""

    def __init__(self, raw: str, field: str, hemisphere: Hemisphere | None,
                 plain_south: PlainSouth, mapping: dict[str, tuple[int, ...]]) -> None:
        self.raw, self.field = raw, field
        self.hemisphere, self.plain_south, self.mapping = hemisphere, plain_south, mapping

    def fail(self, reason: str, code: str = "unreadable_period") -> PeriodError:
        return PeriodError(self.field, reason, code, self.raw)

    def read(self, norm: str, order: Order | None) -> Period:
        if not norm:
            raise self.fail("the text holds no date")
        stripped = _unqualified(norm)
        if stripped != norm and stripped:
            return self._vague(self.read(stripped, order))
        season = read_season(norm, self.raw, self.field, hemisphere=self.hemisphere,
                             plain_south=self.plain_south, mapping=self.mapping)
        if season is not None:
            return Period(season.start, season.end, "season", season.flags, season.notes)
        for form in (self._split_year, self._iso_interval, self._decade_or_quarter, self._single,
                     self._range):
            period = form(norm, order)
            if period is not None:
                return period
        raise self.fail(self._unreadable_reason(norm))

    def _unreadable_reason(self, norm: str) -> str:
        if TWO_DIGIT_YEAR.fullmatch(norm) or re.fullmatch(r"\d{1,2}[/.\-]\d{2}", norm):
            return "two-digit years are not read (the century is unknown); write the year in full"
        if re.search(r"\b(?:before|after|since|prior to|by|pre|post|present|ongoing|now)\b", norm):
            return "an open-ended period has no window; give its start and end"
        if re.search(r"(?:spring|summer|autumn|fall|winter)-(?:spring|summer|autumn|fall|winter)", norm):
            return "a range of seasons is not read; write the months instead (e.g. Mar-Aug 2004)"
        if re.fullmatch(r"p[\dymwdths.,]*", norm):
            return "a duration alone is no period; anchor it to a date (e.g. 2013-04-01/P3M)"
        if "M" not in norm and not re.search(r"\d{4}", norm):
            return "no year found; a period needs a four-digit year"
        return ("no date form recognised (e.g. 2011-03-05, March 2011, 3-9 March 2011, "
                "Jul-Sep 2012, 2008-2010, 2013-04-01/P3M, austral summer 2012)")

    def _vague(self, inner: Period) -> Period:
        if "vague_qualifier" in inner.flags:
            return inner  # already widened (a qualifier inside a range)
        start, end, precision = inner.start, inner.end, inner.precision
        if precision == "day" and start is not None and end is not None:
            start, end, precision = start.replace(day=1), month_end(end), "month"
        unit = str(precision)
        if start is not None and end is not None and precision == "month" and (start.year, start.month) != (
                end.year, end.month):
            unit = "months"
        note = (f"{self.raw.strip()!r} has a vague qualifier (such as mid, early, late, about); the "
                f"window is the whole {unit} named, not a guessed part of it")
        if start is not None:
            note += f" ({start}..{end})"
        return Period(start, end, precision, ("vague_qualifier", *inner.flags), (note, *inner.notes))

    def _decade_or_quarter(self, norm: str, order: Order | None) -> Period | None:
        if d := re.fullmatch(r"(?:the )?(\d{3})0'?s", norm):
            decade = int(d.group(1)) * 10
            if decade == 0:
                raise self.fail("year 0 is outside the calendar (years run 1-9999)", "impossible_date")
            return Period(dt.date(decade, 1, 1), dt.date(decade + 9, 12, 31), "years", ())
        m = re.fullmatch(r"q([1-4])[ \-]?(\d{4})|(\d{4})[ \-]?q([1-4])", norm)
        if m is None:
            return None
        quarter, year = (int(m.group(1)), int(m.group(2))) if m.group(1) else (int(m.group(4)), int(m.group(3)))
        first = check_date(year, 3 * quarter - 2, 1, self.raw, self.field)
        return Period(first, month_end(dt.date(year, 3 * quarter, 1)), "month", ())

    def _split_year(self, norm: str, order: Order | None) -> Period | None:
        m = re.fullmatch(r"(\d{4})/(\d{2}|\d{4})", norm)
        if m is None:
            return None
        y1, tail = int(m.group(1)), m.group(2)
        check_date(y1, 1, 1, self.raw, self.field)
        if len(tail) == 4 and int(tail) != y1 + 1:
            return None  # an ISO interval of years
        y2 = y1 // 100 * 100 + int(tail) + (100 if int(tail) < y1 % 100 else 0) if len(tail) == 2 else int(tail)
        if y2 != y1 + 1:
            hint = (f"; for {MONTH_NAMES[int(tail) - 1]} {y1} write {y1}-{tail}" if 1 <= int(tail) <= 12
                    else f"; for the years {y1} to {y2} write {y1}-{y2}")
            raise self.fail(f"a split year names two consecutive years (e.g. {y1}/{str(y1 + 1)[-2:]})"
                            + hint, "unreadable_period")
        note = (f"{self.raw.strip()!r} may mean a split year (e.g. July {y1} to June {y2}) or a "
                "season across the year end; the window covers both calendar years")
        return Period(dt.date(y1, 1, 1), dt.date(y2, 12, 31), "years", ("split_year",), (note,))

    def _iso_interval(self, norm: str, order: Order | None) -> Period | None:
        parts = norm.split("/") if norm.count("/") == 1 else norm.split("--") if norm.count("--") == 1 else []
        if len(parts) != 2:
            return None
        left, right = parts
        f = self.field
        dur_l, dur_r = read_duration(left, self.raw, f), read_duration(right, self.raw, f)
        p_l = None if dur_l else read_point(left, order=None, text=self.raw, field=f, iso_only=True)
        p_r = None if dur_r else read_point(right, order=None, text=self.raw, field=f, iso_only=True)
        if p_l is not None and p_r is None and dur_r is None:
            p_r = self._abbreviated_end(p_l, right)
        if dur_l and dur_r:
            raise self.fail("an interval of two durations has no dates")
        if p_l is not None and p_r is not None:
            return self._between(p_l, p_r)
        try:
            return self._with_duration(p_l, p_r, dur_l, dur_r)
        except OverflowError:
            raise self.fail("the interval reaches beyond the calendar (years 1-9999)", "impossible_date") from None

    def _with_duration(self, p_l: Point | None, p_r: Point | None, dur_l: Duration | None,
                       dur_r: Duration | None) -> Period | None:
        f = self.field
        if p_l is not None and dur_r is not None:
            first, last = point_window(p_l, self.raw, f)
            start = instant_of(p_l, first, last, at_end=False)
            end = self._shifted(start, dur_r, +1)
            stop = last_day_before(end, start)
            return Period(first, stop, _precision([p_l.unit, dur_r.unit], first, stop), ())
        if dur_l is not None and p_r is not None:
            first, last = point_window(p_r, self.raw, f)
            end = instant_of(p_r, first, last, at_end=True)
            start = self._shifted(end, dur_l, -1)
            stop = last_day_before(end, start)
            return Period(start.date(), stop, _precision([p_r.unit, dur_l.unit], start.date(), stop), ())
        return None

    def _shifted(self, instant: dt.datetime, duration: Duration, sign: int) -> dt.datetime:
        try:
            return shift(instant, duration, sign)
        except (ValueError, OverflowError):
            raise self.fail("the duration reaches beyond the calendar (years 1-9999)", "impossible_date") from None

    def _abbreviated_end(self, start: Point, right: str) -> Point | None:
        """ISO 8601 lets the end omit the leading fields it shares with the start."""
        if start.span is not None or start.year is None:
            return None
        if start.day is not None and (m := re.fullmatch(r"(\d{2})-(\d{2})", right)):
            return Point(start.year, int(m.group(1)), int(m.group(2)))
        if start.day is not None and re.fullmatch(r"\d{2}", right):
            return Point(start.year, start.month, int(right))
        if start.month is not None and start.day is None and re.fullmatch(r"\d{2}", right):
            return Point(start.year, int(right))
        return None

    def _between(self, left: Point, right: Point, hint: str = "") -> Period:
        first, _ = point_window(left, self.raw, self.field)
        _, last = point_window(right, self.raw, self.field)
        if last < first:
            raise self.fail(f"the end {last} is before the start {first}{hint}", "end_before_start")
        return Period(first, last, _precision([left.unit, right.unit], first, last), ())

    def _single(self, norm: str, order: Order | None) -> Period | None:
        point = read_point(norm, order=order, text=self.raw, field=self.field)
        if point is None:
            return None
        try:
            first, last = point_window(point, self.raw, self.field)
        except PeriodError as err:
            m = re.fullmatch(r"(\d{2})(\d{2})-(\d{2})", norm)
            if m is None or int(m.group(3)) <= 12 or int(m.group(3)) <= int(m.group(2)):
                raise
            years = f"{m.group(1)}{m.group(2)}-{m.group(1)}{m.group(3)}"
            raise self.fail(f"{err.reason}; for the years {years.replace('-', ' to ')} write {years}",
                            "impossible_date") from None
        return Period(first, last, _precision([point.unit], first, last), ())

    def _range(self, norm: str, order: Order | None) -> Period | None:
        for m in re.finditer("-", norm):
            left, right = norm[: m.start()].strip(), norm[m.end() :].strip()
            if not left or not right:
                continue
            points: list[Point | None] = []
            needs_order = vague = False
            for side in (left, right):
                try:
                    point = read_point(side, order=order, text=self.raw, field=self.field, partial=True)
                    if point is None and _unqualified(side) not in (side, ""):
                        point = read_point(_unqualified(side), order=order, text=self.raw,
                                           field=self.field, partial=True)
                        vague = vague or point is not None
                    points.append(point)
                except NeedsOrder:
                    needs_order = True
                    points.append(Point())
            if points[0] is None or points[1] is None:
                continue
            if needs_order:
                raise NeedsOrder
            filled = fill_range(points[0], points[1])
            if filled is None:
                continue
            hint = ""
            a, b = filled
            if points[0].year is None and a.span is None and a.day is None and a.month and b.month and b.year:
                hint = (f"; a range across the year end needs both years (e.g. {MONTH_ABBR[a.month - 1]} "
                        f"{b.year - 1}-{MONTH_ABBR[b.month - 1]} {b.year})")
                if (a.month, b.month) == (12, 2):
                    hint = hint[:-1] + f", or DJF {b.year})"
            period = self._between(*filled, hint=hint)
            return self._vague(period) if vague else period
        return None
