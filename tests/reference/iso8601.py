"""Reference examples for period text, from ISO 8601-1:2019 and the Gregorian calendar.

Source of the ISO blocks: ISO 8601-1:2019, *Date and time — Representations for
information interchange — Part 1: Basic rules*. The standard is not available here, so
every example and clause number below is **from memory** of its text (the same examples
appear in ISO 8601:2004, whose clause numbers differ: 4.1.2 calendar dates, 4.1.3
ordinal dates, 4.1.4 week dates, 4.4 time intervals). Each expected window is the
inclusive range of calendar days the representation covers (envlink's convention,
docs/locate-periods.md), worked out by hand and cross-checked in the tests against Python's
``datetime`` (``date.fromisoformat``, ``date.fromisocalendar``).

Calendar facts (leap years, month lengths) are not typed in here: the tests take them
from Python's ``calendar`` module (``calendar.isleap``, ``calendar.monthrange``), the
proleptic Gregorian calendar that ISO 8601 §4 (from memory) prescribes.
"""

from __future__ import annotations

from datetime import date

#: (clause, text, first day, last day, precision) — from memory
ISO_DATES: list[tuple[str, str, date, date, str]] = [
    # §5.2.2.1 calendar date, complete representation, extended format
    ("5.2.2.1", "1985-04-12", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.2.1 calendar date, complete representation, basic format
    ("5.2.2.1", "19850412", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.2.2 reduced precision: a specific month
    ("5.2.2.2", "1985-04", date(1985, 4, 1), date(1985, 4, 30), "month"),
    # §5.2.2.2 reduced precision: a specific year
    ("5.2.2.2", "1985", date(1985, 1, 1), date(1985, 12, 31), "year"),
    # §5.2.3 ordinal date, extended format (day 102 of 1985 = 12 April)
    ("5.2.3", "1985-102", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.3 ordinal date, basic format
    ("5.2.3", "1985102", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.4 week date, complete, extended format (Friday of week 15 of 1985)
    ("5.2.4", "1985-W15-5", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.4 week date, complete, basic format
    ("5.2.4", "1985W155", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.2.4 week date, reduced precision: a whole week (Monday to Sunday)
    ("5.2.4", "1985-W15", date(1985, 4, 8), date(1985, 4, 14), "day"),
    # §5.4.2 date and time of day, complete, extended format (UTC)
    ("5.4.2", "1985-04-12T10:15:30Z", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.4.2 date and time of day, basic format
    ("5.4.2", "19850412T101530", date(1985, 4, 12), date(1985, 4, 12), "day"),
    # §5.4.2 with a UTC offset; the date part is kept as written (offset ignored)
    ("5.4.2", "1985-04-12T23:20:50+04:00", date(1985, 4, 12), date(1985, 4, 12), "day"),
]

#: (clause, text, first day, last day, precision) — from memory
ISO_INTERVALS: list[tuple[str, str, date, date, str]] = [
    # §5.5.4.1 start and end, extended format with times
    ("5.5.4.1", "2007-03-01T13:00:00Z/2008-05-11T15:30:00Z", date(2007, 3, 1), date(2008, 5, 11), "day"),
    # §5.5.4.1 start and end, basic format with times
    ("5.5.4.1", "19850412T232050/19850625T103000", date(1985, 4, 12), date(1985, 6, 25), "day"),
    # §5.5.4.3 start and duration: 13:00 + 1 year 2 months 10 days 2 h 30 min = 2008-05-11T15:30
    ("5.5.4.3", "2007-03-01T13:00:00Z/P1Y2M10DT2H30M", date(2007, 3, 1), date(2008, 5, 11), "day"),
    # §5.5.4.3 duration and end: the same interval, anchored at its end
    ("5.5.4.3", "P1Y2M10DT2H30M/2008-05-11T15:30:00Z", date(2007, 3, 1), date(2008, 5, 11), "day"),
    # §5.5.4.3 start and duration with the 1985 example: 1985-04-12T23:20:50 + P1Y2M15DT12H30M0S
    #   = 1986-06-28T11:50:50 (months first: 1986-06-12, then 15 days 12 h 30 min)
    ("5.5.4.3", "1985-04-12T23:20:50/P1Y2M15DT12H30M0S", date(1985, 4, 12), date(1986, 6, 28), "day"),
    # §5.5.4.2 reduced end: the end omits the year it shares with the start
    ("5.5.4.2", "2008-02-15/03-14", date(2008, 2, 15), date(2008, 3, 14), "day"),
    # §5.5.2 a duration in weeks, from a date: 4 weeks from 2012-01-02 (inclusive end)
    ("5.5.2", "2012-01-02/P4W", date(2012, 1, 2), date(2012, 1, 29), "day"),
    # §5.5.1 the solidus may be replaced by a double hyphen
    ("5.5.1", "2012-01-05--2012-01-09", date(2012, 1, 5), date(2012, 1, 9), "day"),
]

#: durations of §5.5.2 (from memory) and their fields (years, months, weeks, days, seconds)
ISO_DURATIONS: list[tuple[str, str, tuple[int, int, int, int, float]]] = [
    # §5.5.2.4 complete representation with every field
    ("5.5.2.4", "P3Y6M4DT12H30M5S", (3, 6, 0, 4, 12 * 3600 + 30 * 60 + 5.0)),
    # §5.5.2.4 weeks alone
    ("5.5.2.4", "P4W", (0, 0, 4, 0, 0.0)),
    # §5.5.2.4 reduced: a time-only duration
    ("5.5.2.4", "PT36H", (0, 0, 0, 0, 36 * 3600.0)),
    # §5.5.2.4 decimal fraction on the lowest field (seconds)
    ("5.5.2.4", "PT0,5S", (0, 0, 0, 0, 0.5)),
]
