"""Period text to inclusive windows: hand-written cases, ISO 8601 examples, errors."""

from __future__ import annotations

import calendar
import datetime as dt
import math

import pytest
from reference.iso8601 import ISO_DATES, ISO_DURATIONS, ISO_INTERVALS

import envlink
from envlink.errors import InputError
from envlink.locate._periodtext import read_duration
from envlink.locate.periods import (
    MISSING_MARKERS,
    Period,
    PeriodError,
    is_missing,
    parse_period,
    parse_period_columns,
)

D = dt.date
WET = {"wet": [11, 12, 1, 2, 3, 4], "dry": [5, 6, 7, 8, 9, 10]}

# (text, options, start, end, precision, flags). Windows are inclusive days (docs/locate-periods.md).
# Month lengths and leap years in the expected values follow the Gregorian calendar,
# checked against Python's calendar module in test_expected_windows_follow_the_calendar.
CASES = [
    # ISO 8601 calendar date, extended format (from memory: ISO 8601-1 §5.2.2.1)
    ("2011-03-05", {}, D(2011, 3, 5), D(2011, 3, 5), "day", ()),
    # ISO 8601 year-month, reduced precision (from memory: §5.2.2.2): the whole month
    ("2011-03", {}, D(2011, 3, 1), D(2011, 3, 31), "month", ()),
    # a year alone: the whole calendar year (from memory: §5.2.2.2)
    ("2011", {}, D(2011, 1, 1), D(2011, 12, 31), "year", ()),
    # February of a leap year has 29 days (Gregorian rule; common practice)
    ("2012-02", {}, D(2012, 2, 1), D(2012, 2, 29), "month", ()),
    # date-time: the date part, no flag (issue 2: time zone ignored)
    ("2012-01-05T10:30:00Z", {}, D(2012, 1, 5), D(2012, 1, 5), "day", ()),
    # date-time with a space and no seconds (common practice in spreadsheets)
    ("2012-01-05 10:30", {}, D(2012, 1, 5), D(2012, 1, 5), "day", ()),
    # date-time with a negative UTC offset: the date as written is kept
    ("2012-01-05T23:30-05:00", {}, D(2012, 1, 5), D(2012, 1, 5), "day", ()),
    # ISO basic format date (from memory: §5.2.2.1)
    ("20120105", {}, D(2012, 1, 5), D(2012, 1, 5), "day", ()),
    # day range inside one month (issue 2 example)
    ("3-9 March 2011", {}, D(2011, 3, 3), D(2011, 3, 9), "day", ()),
    # day range with an en dash and spaces
    ("3 – 9 March 2011", {}, D(2011, 3, 3), D(2011, 3, 9), "day", ()),
    # day range across a month end (issue 2 example)
    ("28 Feb - 3 Mar 2011", {}, D(2011, 2, 28), D(2011, 3, 3), "day", ()),
    # day range written with "to"
    ("3 to 9 March 2011", {}, D(2011, 3, 3), D(2011, 3, 9), "day", ()),
    # month-first day range, US style
    ("March 3-9, 2011", {}, D(2011, 3, 3), D(2011, 3, 9), "day", ()),
    # day range across the year end, both years written
    ("28 Dec 2011 - 3 Jan 2012", {}, D(2011, 12, 28), D(2012, 1, 3), "day", ()),
    # month range in one year (issue 2 example)
    ("Jul-Sep 2012", {}, D(2012, 7, 1), D(2012, 9, 30), "month", ()),
    # month range with full names and "to" (issue 2 example)
    ("July to September 2012", {}, D(2012, 7, 1), D(2012, 9, 30), "month", ()),
    # month range across the year end (issue 2 example): still precision month (docs/locate-periods.md)
    ("Oct 2010-Jan 2011", {}, D(2010, 10, 1), D(2011, 1, 31), "month", ()),
    # month range with spaced hyphen (issue 2 example); Feb 2010 has 28 days
    ("Dec 2009 - Mar 2010", {}, D(2009, 12, 1), D(2010, 3, 31), "month", ()),
    # month range in capitals
    ("JUL-SEP 2012", {}, D(2012, 7, 1), D(2012, 9, 30), "month", ()),
    # "from ... to ..." wording
    ("from March to May 2011", {}, D(2011, 3, 1), D(2011, 5, 31), "month", ()),
    # year range with hyphen (issue 2 example): several years -> "years"
    ("2008-2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # year range with en dash
    ("2008–2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # year range with em dash
    ("2008—2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # year range with "to"
    ("2008 to 2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # "between ... and ..." wording
    ("between 2008 and 2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # abbreviated month with a full stop ("Sept." is common in papers)
    ("Sept. 2011", {}, D(2011, 9, 1), D(2011, 9, 30), "month", ()),
    # full month name, any case
    ("march 2011", {}, D(2011, 3, 1), D(2011, 3, 31), "month", ()),
    # day-month-year in words
    ("15 March 2011", {}, D(2011, 3, 15), D(2011, 3, 15), "day", ()),
    # month-day-year in words with a comma
    ("March 15, 2011", {}, D(2011, 3, 15), D(2011, 3, 15), "day", ()),
    # ordinal day suffix
    ("15th March 2011", {}, D(2011, 3, 15), D(2011, 3, 15), "day", ()),
    # spreadsheet style day-month-year with hyphens
    ("15-Mar-2011", {}, D(2011, 3, 15), D(2011, 3, 15), "day", ()),
    # spreadsheet style month-year
    ("Mar-2011", {}, D(2011, 3, 1), D(2011, 3, 31), "month", ()),
    # year-first slashes are read year-month-day (nobody writes year-day-month)
    ("2011/03/05", {}, D(2011, 3, 5), D(2011, 3, 5), "day", ()),
    # numeric month/year
    ("06/2011", {}, D(2011, 6, 1), D(2011, 6, 30), "month", ()),
    # ISO interval of days (issue 2 example; from memory: §5.5.4.1)
    ("2012-01-05/2012-01-09", {}, D(2012, 1, 5), D(2012, 1, 9), "day", ()),
    # ISO interval of months (issue 2 example)
    ("2013-04/2013-06", {}, D(2013, 4, 1), D(2013, 6, 30), "month", ()),
    # ISO start/duration: three months from 1 April, end inclusive (issue 2 example)
    ("2013-04-01/P3M", {}, D(2013, 4, 1), D(2013, 6, 30), "day", ()),
    # ISO duration/end: the month ending 30 June
    ("P1M/2013-06-30", {}, D(2013, 6, 1), D(2013, 6, 30), "day", ()),
    # ISO duration in days: 10 days from 5 January are 5..14 January
    ("2012-01-05/P10D", {}, D(2012, 1, 5), D(2012, 1, 14), "day", ()),
    # ISO month anchor with a month duration: April..June at month precision
    ("2013-04/P3M", {}, D(2013, 4, 1), D(2013, 6, 30), "month", ()),
    # ISO interval of years that are not consecutive: plain years range, no flag
    ("2008/2010", {}, D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # ISO reduced end "2012-01-05/09": day 9 of the same month (from memory: §5.5.4.2)
    ("2012-01-05/09", {}, D(2012, 1, 5), D(2012, 1, 9), "day", ()),
    # season year with austral summer: Dec 2011 - Feb 2012 (issue 2 example)
    ("austral summer 2011/12", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # season year written with both years in full
    ("austral summer 2011/2012", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # a split year across a century
    ("austral summer 1999/00", {}, D(1999, 12, 1), D(2000, 2, 29), "season", ()),
    # split year alone: both calendar years, flagged (policy: superset window)
    ("2011/12", {}, D(2011, 1, 1), D(2012, 12, 31), "years", ("split_year",)),
    # consecutive years with a slash read the same way
    ("2011/2012", {}, D(2011, 1, 1), D(2012, 12, 31), "years", ("split_year",)),
    # austral summer of a year = the DJF season containing its January (issue 2 example)
    ("austral summer 2012", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # boreal winter of a year: same DJF convention
    ("boreal winter 2012", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # meteorological quarter code DJF (common practice: WMO seasons)
    ("DJF 2012", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # JJA lies within one year
    ("JJA 2012", {}, D(2012, 6, 1), D(2012, 8, 31), "season", ()),
    # SON, year first
    ("2012 SON", {}, D(2012, 9, 1), D(2012, 11, 30), "season", ()),
    # boreal autumn = SON
    ("boreal autumn 2012", {}, D(2012, 9, 1), D(2012, 11, 30), "season", ()),
    # austral autumn = MAM; "fall" is a synonym
    ("austral fall 2012", {}, D(2012, 3, 1), D(2012, 5, 31), "season", ()),
    # "southern" is read as austral
    ("southern winter 2010", {}, D(2010, 6, 1), D(2010, 8, 31), "season", ()),
    # "the summer of 2010" wording, at a northern site
    ("the summer of 2010", {"hemisphere": "north"}, D(2010, 6, 1), D(2010, 8, 31), "season",
     ("season_by_hemisphere",)),
    # plain season at a northern site: boreal, flagged
    ("summer 2010", {"hemisphere": "north"}, D(2010, 6, 1), D(2010, 8, 31), "season",
     ("season_by_hemisphere",)),
    # plain winter at a northern site: DJF containing January 2010
    ("winter 2010", {"hemisphere": "north"}, D(2009, 12, 1), D(2010, 2, 28), "season",
     ("season_by_hemisphere",)),
    # plain season at a southern site when the option says austral
    ("summer 2010", {"hemisphere": "south", "plain_season_south": "austral"},
     D(2009, 12, 1), D(2010, 2, 28), "season", ("season_by_hemisphere",)),
    # plain season at a southern site when the option says boreal
    ("summer 2010", {"hemisphere": "south", "plain_season_south": "boreal"},
     D(2010, 6, 1), D(2010, 8, 31), "season", ("season_by_option",)),
    # plain summer with a split year can only be the austral summer (Dec-Feb)
    ("summer 2011/12", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ("season_by_split_year",)),
    # wet season through the user's month mapping: crosses the year end -> year of its January
    ("wet season 2012", {"season_months": WET}, D(2011, 11, 1), D(2012, 4, 30), "season", ()),
    # wet season with a split year
    ("wet season 2011/12", {"season_months": WET}, D(2011, 11, 1), D(2012, 4, 30), "season", ()),
    # dry season within one year
    ("dry season 2012", {"season_months": WET}, D(2012, 5, 1), D(2012, 10, 31), "season", ()),
    # vague "mid-": the whole year, flagged, never a guessed middle
    ("mid-2014", {}, D(2014, 1, 1), D(2014, 12, 31), "year", ("vague_qualifier",)),
    # vague "late"
    ("late 2009", {}, D(2009, 1, 1), D(2009, 12, 31), "year", ("vague_qualifier",)),
    # vague "early"
    ("early 2010", {}, D(2010, 1, 1), D(2010, 12, 31), "year", ("vague_qualifier",)),
    # "ca." (circa)
    ("ca. 2005", {}, D(2005, 1, 1), D(2005, 12, 31), "year", ("vague_qualifier",)),
    # "around"
    ("around 2005", {}, D(2005, 1, 1), D(2005, 12, 31), "year", ("vague_qualifier",)),
    # a trailing question mark
    ("2005?", {}, D(2005, 1, 1), D(2005, 12, 31), "year", ("vague_qualifier",)),
    # "c." directly before the year
    ("c.2005", {}, D(2005, 1, 1), D(2005, 12, 31), "year", ("vague_qualifier",)),
    # a trailing "(approx.)"
    ("2005 (approx.)", {}, D(2005, 1, 1), D(2005, 12, 31), "year", ("vague_qualifier",)),
    # vague month: the whole month
    ("early March 2011", {}, D(2011, 3, 1), D(2011, 3, 31), "month", ("vague_qualifier",)),
    # vague day: widened to its whole month
    ("ca. 15 March 2011", {}, D(2011, 3, 1), D(2011, 3, 31), "month", ("vague_qualifier",)),
    # qualifiers on the ends of a range: the whole months from the first to the last
    ("mid-March to late April 2011", {}, D(2011, 3, 1), D(2011, 4, 30), "month", ("vague_qualifier",)),
    # qualified years in a range: the whole years
    ("late 2009 - early 2011", {}, D(2009, 1, 1), D(2011, 12, 31), "years", ("vague_qualifier",)),
    # numeric date with a field > 12: unambiguous, day first
    ("25/06/2011", {}, D(2011, 6, 25), D(2011, 6, 25), "day", ()),
    # numeric date with a field > 12: unambiguous, month first
    ("06/25/2011", {}, D(2011, 6, 25), D(2011, 6, 25), "day", ()),
    # both fields equal: no ambiguity
    ("05/05/2011", {}, D(2011, 5, 5), D(2011, 5, 5), "day", ()),
    # explicit day-first order resolves 05/06
    ("05/06/2011", {"order": "dayfirst"}, D(2011, 6, 5), D(2011, 6, 5), "day", ()),
    # explicit month-first order resolves 05/06
    ("05/06/2011", {"order": "monthfirst"}, D(2011, 5, 6), D(2011, 5, 6), "day", ()),
    # dotted numeric date, day first
    ("5.6.2011", {"order": "dayfirst"}, D(2011, 6, 5), D(2011, 6, 5), "day", ()),
    # a range whose second date decides the order for both (25 > 12 -> day first)
    ("05/06/2011-25/06/2011", {}, D(2011, 6, 5), D(2011, 6, 25), "day", ()),
    # ISO date range with an abbreviated end day
    ("2011-03-05-09", {}, D(2011, 3, 5), D(2011, 3, 9), "day", ()),
    # ISO week date: the whole week, Monday to Sunday (from memory: §5.2.4)
    ("2011-W10", {}, D(2011, 3, 7), D(2011, 3, 13), "day", ()),
    # season year written with a hyphen, as many papers do
    ("austral summer 2011-12", {}, D(2011, 12, 1), D(2012, 2, 29), "season", ()),
    # other runs of month initials (common practice in climatology): JFM
    ("JFM 2012", {}, D(2012, 1, 1), D(2012, 3, 31), "season", ()),
    # a six-month code across the year end belongs to the year of its January
    ("NDJFMA 2012", {}, D(2011, 11, 1), D(2012, 4, 30), "season", ()),
    # a decade: its ten whole years
    ("1990s", {}, D(1990, 1, 1), D(1999, 12, 31), "years", ()),
    # a vague decade: still the whole decade
    ("early 1990s", {}, D(1990, 1, 1), D(1999, 12, 31), "years", ("vague_qualifier",)),
    # a calendar quarter: three whole months
    ("Q3 2011", {}, D(2011, 7, 1), D(2011, 9, 30), "month", ()),
    # ISO-like date without zero padding
    ("2011-3-5", {}, D(2011, 3, 5), D(2011, 3, 5), "day", ()),
    # ISO interval with spaces around the solidus
    ("2012-01-05 / 2012-01-09", {}, D(2012, 1, 5), D(2012, 1, 9), "day", ()),
    # integers from a numeric column are years
    (2011, {}, D(2011, 1, 1), D(2011, 12, 31), "year", ()),
    # a float year from a numeric column with blanks
    (2011.0, {}, D(2011, 1, 1), D(2011, 12, 31), "year", ()),
    # a datetime.date value
    (D(2011, 3, 5), {}, D(2011, 3, 5), D(2011, 3, 5), "day", ()),
]


@pytest.mark.parametrize(("text", "options", "start", "end", "precision", "flags"), CASES)
def test_hand_written_cases(text, options, start, end, precision, flags) -> None:
    period = parse_period(text, **options)
    assert period is not None
    assert (period.start, period.end, period.precision, period.flags) == (start, end, precision, flags)
    assert len(period.notes) == len(period.flags)  # every flag is explained by a sentence


def test_there_are_at_least_sixty_hand_written_cases() -> None:
    assert len(CASES) >= 60


def test_expected_windows_follow_the_calendar() -> None:
    # Calendar facts checked against Python's calendar module (proleptic Gregorian).
    assert calendar.isleap(2012) and not calendar.isleap(2011)
    assert calendar.isleap(2000) and not calendar.isleap(1900)  # the century rules
    for text, _options, start, end, precision, _ in CASES:
        if precision in ("month", "season") and isinstance(text, str) and "ca." not in text:
            assert start.day == 1
            assert end.day == calendar.monthrange(end.year, end.month)[1], text


# (text, options, precision, flag, fragments the note must contain: both readings)
AMBIGUOUS = [
    # numeric day/month order not decided (issue 2)
    ("05/06/2011", {}, "day", "ambiguous_day_month", ("2011-06-05", "2011-05-06")),
    # dotted form
    ("5.6.2011", {}, "day", "ambiguous_day_month", ("2011-06-05", "2011-05-06")),
    # hyphenated form
    ("05-06-2011", {}, "day", "ambiguous_day_month", ("2011-06-05", "2011-05-06")),
    # a range of two undecided dates keeps both readings of the whole range
    ("05/06/2011-07/08/2011", {}, "day", "ambiguous_day_month",
     ("2011-06-05..2011-08-07", "2011-05-06..2011-07-08")),
    # plain season without a hemisphere
    ("summer 2010", {}, "season", "ambiguous_season", ("2010-06-01..2010-08-31", "2009-12-01..2010-02-28")),
    # plain season at a southern site (default option)
    ("summer 2010", {"hemisphere": "south"}, "season", "ambiguous_season",
     ("boreal summer", "austral summer")),
    # plain spring without a hemisphere: MAM or SON
    ("spring 2010", {}, "season", "ambiguous_season", ("2010-03-01..2010-05-31", "2010-09-01..2010-11-30")),
]


@pytest.mark.parametrize(("text", "options", "precision", "flag", "fragments"), AMBIGUOUS)
def test_ambiguous_periods_are_unresolved_with_both_readings(text, options, precision, flag, fragments) -> None:
    period = parse_period(text, **options)
    assert period is not None
    assert period.start is None and period.end is None
    assert period.precision == precision and flag in period.flags
    for fragment in fragments:
        assert fragment in period.notes[0]


def test_vague_ambiguous_season_keeps_both_flags() -> None:
    period = parse_period("early summer 2010")
    assert period is not None and period.start is None
    assert period.flags == ("vague_qualifier", "ambiguous_season")


@pytest.mark.parametrize("text", ["", "  ", "n.d.", "nd", "ND", "unknown", "NA", "N/A", "n/a", "-", "?",
                                  "(unknown)", "not reported", None, float("nan"), math.nan])
def test_missing_markers_give_none(text) -> None:
    assert is_missing(text)
    assert parse_period(text) is None


def test_missing_markers_are_lower_case_and_pandas_na_is_missing() -> None:
    import pandas as pd

    assert all(marker == marker.lower() for marker in MISSING_MARKERS)
    assert is_missing(pd.NA) and is_missing(pd.NaT)
    assert not is_missing("2011") and not is_missing(2011)


# ---------------------------------------------------------------- ISO 8601 examples


@pytest.mark.parametrize(("clause", "text", "start", "end", "precision"), ISO_DATES + ISO_INTERVALS)
def test_iso8601_examples(clause, text, start, end, precision) -> None:
    # Source: ISO 8601-1:2019, the clause given in tests/reference/iso8601.py (from memory).
    period = parse_period(text)
    assert period is not None
    assert (period.start, period.end, period.precision) == (start, end, precision), clause


@pytest.mark.parametrize(("clause", "text", "start", "end", "precision"), ISO_DATES)
def test_iso8601_dates_agree_with_python_datetime(clause, text, start, end, precision) -> None:
    # Independent reference: Python's datetime (date.fromisoformat reads the complete
    # forms; date.fromisocalendar the week dates; strptime %Y%j the ordinal dates).
    if precision != "day":
        return
    if "W" in text:
        digits = text.replace("-", "").split("W")
        week = digits[1]
        ref = dt.date.fromisocalendar(int(digits[0]), int(week[:2]), int(week[2:] or 1))
    elif len(text.replace("-", "")) == 7:
        ref = dt.datetime.strptime(text.replace("-", ""), "%Y%j").date()
    else:
        ref = dt.datetime.fromisoformat(text.replace("Z", "+00:00")).date()
    assert start == ref


@pytest.mark.parametrize(("clause", "text", "fields"), ISO_DURATIONS)
def test_iso8601_durations(clause, text, fields) -> None:
    # Source: ISO 8601-1:2019 §5.5.2 (from memory).
    d = read_duration(text.lower(), text, "period")
    assert d is not None
    assert (d.years, d.months, d.weeks, d.days) == fields[:4]
    assert d.seconds == pytest.approx(fields[4], abs=1e-9)


# ---------------------------------------------------------------- separate columns


COLUMN_CASES = [
    # start month and end day: first day of March to 15 June, precision the coarser (month)
    ("March 2011", "2011-06-15", D(2011, 3, 1), D(2011, 6, 15), "month", ()),
    # two years: several years -> years
    ("2008", "2010", D(2008, 1, 1), D(2010, 12, 31), "years", ()),
    # the same year twice -> year
    ("2008", "2008", D(2008, 1, 1), D(2008, 12, 31), "year", ()),
    # two days
    ("2011-03-05", "2011-03-09", D(2011, 3, 5), D(2011, 3, 9), "day", ()),
    # a season start and a day end: season is coarser
    ("austral summer 2012", "2012-03-15", D(2011, 12, 1), D(2012, 3, 15), "season", ()),
    # a missing end: the start's own window, flagged
    ("2011-03-05", "n.d.", D(2011, 3, 5), D(2011, 3, 5), "day", ("end_missing",)),
    # a missing start: the end's own window, flagged
    ("", "March 2011", D(2011, 3, 1), D(2011, 3, 31), "month", ("start_missing",)),
    # flags of each column are kept
    ("mid-2010", "2011", D(2010, 1, 1), D(2011, 12, 31), "years", ("vague_qualifier",)),
]


@pytest.mark.parametrize(("start_text", "end_text", "start", "end", "precision", "flags"), COLUMN_CASES)
def test_separate_start_and_end_columns(start_text, end_text, start, end, precision, flags) -> None:
    period = parse_period_columns(start_text, end_text)
    assert period is not None
    assert (period.start, period.end, period.precision, period.flags) == (start, end, precision, flags)


def test_columns_both_missing_and_ambiguous() -> None:
    assert parse_period_columns("n.d.", None) is None
    period = parse_period_columns("05/06/2011", "2011-07-01")
    assert period is not None and period.start is None and period.flags == ("ambiguous_day_month",)
    resolved = parse_period_columns("05/06/2011", "2011-07-01", order="dayfirst")
    assert resolved == Period(D(2011, 6, 5), D(2011, 7, 1), "day", ())


# ---------------------------------------------------------------- errors


ERRORS = [
    # 2011 is not a leap year (calendar.isleap(2011) is False)
    ("2011-02-29", "impossible_date", r"2011-02-29 is not a date: 2011 is not a leap year"),
    # month 13
    ("2011-13-01", "impossible_date", r"month 13 does not exist"),
    # a year-month with month 13, with a hint towards a year range
    ("2008-13", "impossible_date", r"month 13 does not exist.*2008-2013"),
    # day 32
    ("2011-03-32", "impossible_date", r"day 32 does not exist"),
    # April has 30 days (calendar.monthrange(2011, 4)[1] == 30)
    ("31 April 2011", "impossible_date", r"2011-04-31 is not a date: April 2011 has 30 days"),
    # week 53 does not exist in 2011
    ("2011-W53", "impossible_date", r"week 53 of 2011 does not exist"),
    # ordinal day 366 in a common year
    ("2011-366", "impossible_date", r"day 366 of 2011 does not exist"),
    # hour 25
    ("2011-03-05T25:00", "impossible_date", r"the time 25:00 does not exist"),
    # a year range backwards
    ("2010-2008", "end_before_start", r"the end 2008-12-31 is before the start 2010-01-01"),
    # a month range across the year end with one year: rejected with a hint, not guessed
    ("Dec-Feb 2012", "end_before_start", r"needs both years.*DJF 2012"),
    # ISO interval backwards
    ("2012-01-09/2012-01-05", "end_before_start", r"the end 2012-01-05 is before the start 2012-01-09"),
    # numeric date with both fields > 12
    ("13/13/2011", "impossible_date", r"month 13 does not exist \(months run 1-12\) \["),
    # undecided numeric dates that fail in both orders: both reasons are given
    ("05/06/2011-02/03/2011", "end_before_start",
     r"read day first: the end 2011-03-02 is before .*; read month first: the end 2011-02-03 is before"),
    # two-digit year
    ("05/06/11", "unreadable_period", r"two-digit years are not read"),
    # wet season without a mapping
    ("wet season 2012", "season_needs_mapping", r"the 'wet' season has no fixed months.*season_months \(--season-months on the command line"),
    # any other named season without months
    ("monsoon 2012", "season_needs_mapping", r"'monsoon' season has no fixed months"),
    # a split year for a season inside one calendar year
    ("austral winter 2011/12", "season_year_mismatch", r"austral winter \(Jun-Aug\) lies within one calendar year"),
    # a split year of non-consecutive years
    ("austral summer 2011/13", "season_year_mismatch", r"two consecutive years"),
    # "2011/06" is no split year; the message points to the month form
    ("2011/06", "unreadable_period", r"consecutive years.*for June 2011 write 2011-06"),
    # a range of seasons
    ("spring-summer 2004", "unreadable_period", r"range of seasons is not read"),
    # an open-ended period
    ("before 2005", "unreadable_period", r"open-ended period"),
    # a period running to the present has no end date
    ("Jan 2011 - present", "unreadable_period", r"open-ended period"),
    # a duration alone
    ("P3M", "unreadable_period", r"duration alone"),
    # a fractional month duration
    ("2013-04-01/P1.5M", "unreadable_period", r"only the seconds of a duration may have decimals"),
    # a split year past the calendar's last year (datetime supports years 1-9999)
    ("9999/00", "impossible_date", r"outside the calendar \(years 1-9999\)"),
    # a duration past the calendar's end
    ("9999-12-31/P1D", "impossible_date", r"beyond the calendar"),
    # year 0 does not exist in the proleptic Gregorian calendar of datetime
    ("0000-W01", "impossible_date", r"year 0 is outside the calendar"),
    # a qualifier word inside another word is no qualifier ("humid" holds "mid")
    ("humid season 2012", "season_needs_mapping", r"the 'humid' season has no fixed months"),
    # "2011/13" is neither a split year nor a month; the message points to the year range
    ("2011/13", "unreadable_period", r"for the years 2011 to 2013 write 2011-2013"),
    # words with no date
    ("sometime", "unreadable_period", r"no year found"),
    # a day range without a year
    ("3-9 March", "unreadable_period", r"no date form recognised"),
]


@pytest.mark.parametrize(("text", "code", "reason"), ERRORS)
def test_errors_name_field_value_and_reason(text, code, reason) -> None:
    with pytest.raises(PeriodError, match=reason) as info:
        parse_period(text)
    err = info.value
    assert err.field == "period" and err.code == code and err.text == text
    assert str(err).startswith(f"Cannot read period {text!r}: ")
    assert isinstance(err, InputError) and isinstance(err, ValueError)


def test_explicit_order_contradicted_by_the_text_is_an_error() -> None:
    with pytest.raises(PeriodError, match=r"month 25 does not exist when read month first") as info:
        parse_period("25/06/2011", order="monthfirst")
    assert info.value.code == "impossible_date"


def test_column_errors_name_the_column() -> None:
    with pytest.raises(PeriodError, match=r"Cannot read start '2011-02-29': .*not a leap year") as info:
        parse_period_columns("2011-02-29", "2011-03-01")
    assert info.value.field == "start"
    with pytest.raises(PeriodError, match=r"Cannot read end '2011-06': the end 2011-06-30 is before the start") as info:
        parse_period_columns("2012", "2011-06")
    assert (info.value.field, info.value.code) == ("end", "end_before_start")


@pytest.mark.parametrize(
    ("options", "match"),
    [
        ({"hemisphere": "N"}, r"The 'hemisphere' parameter of parse_period must be 'north', 'south' or None; got 'N'"),
        ({"order": "dmy"}, r"The 'order' parameter of parse_period must be 'dayfirst', 'monthfirst' or None"),
        ({"plain_season_south": "x"}, r"The 'plain_season_south' parameter"),
        ({"season_months": {"wet": [11, 1]}}, r"The 'season_months' parameter.*consecutive months"),
        ({"season_months": {"wet": [0, 1]}}, r"The 'season_months' parameter"),
        ({"season_months": [11, 12]}, r"The 'season_months' parameter"),
    ],
)
def test_bad_options_use_the_parameter_template(options, match) -> None:
    with pytest.raises(InputError, match=match) as info:
        parse_period("2011", **options)
    assert not isinstance(info.value, PeriodError)


def test_unknown_column_option_is_rejected() -> None:
    with pytest.raises(InputError, match=r"The 'hemi' parameter of parse_period_columns"):
        parse_period_columns("2011", "2012", hemi="north")


def test_non_text_values_are_rejected() -> None:
    with pytest.raises(PeriodError, match=r"expected date text, got list"):
        parse_period([2011])  # type: ignore[arg-type]
    with pytest.raises(PeriodError, match=r"got a boolean"):
        parse_period(True)


def test_mapping_months_are_put_in_calendar_order_and_may_override_words() -> None:
    sorted_run = parse_period("wet season 2012", season_months={"Wet": [1, 2, 3, 4, 11, 12]})
    assert sorted_run is not None and (sorted_run.start, sorted_run.end) == (D(2011, 11, 1), D(2012, 4, 30))
    own = parse_period("summer 2012", season_months={"summer": [11, 12, 1, 2, 3]})
    assert own is not None and (own.start, own.end, own.flags) == (D(2011, 11, 1), D(2012, 3, 31), ())


def test_top_level_export() -> None:
    assert envlink.parse_period is parse_period


# ---------------------------------------------------------------- the docs page stays true

_DOC = __import__("pathlib").Path(__file__).resolve().parents[2] / "docs" / "locate-periods.md"
_DOC_SEASONS = {"wet": [11, 12, 1, 2, 3, 4], "dry": [5, 6, 7, 8, 9, 10]}


def _doc_rows() -> list[tuple[str, str, str, str, str]]:
    rows = []
    for line in _DOC.read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 6 and cells[1].startswith("`") and " .. " in cells[3] or (
            len(cells) == 6 and cells[3] == "— (unresolved)"
        ):
            rows.append((cells[1].strip("`"), cells[2], cells[3], cells[4], cells[5]))
    return rows


needs_docs = pytest.mark.skipif(not _DOC.exists(), reason="docs/ not shipped with this install")


@needs_docs
def test_docs_page_lists_forms_flags_and_codes() -> None:
    assert len(_doc_rows()) >= 60
    text = _DOC.read_text(encoding="utf-8")
    flags = {f for case in CASES + COLUMN_CASES for f in case[-1]} | {case[3] for case in AMBIGUOUS}
    codes = {case[1] for case in ERRORS}
    for name in sorted(flags | codes):
        assert f"| `{name}`" in text or f", `{name}` |" in text, name


@needs_docs
def test_docs_page_examples_run() -> None:
    import doctest
    import re

    blocks = re.findall(r"```python\n(.*?)```", _DOC.read_text(encoding="utf-8"), flags=re.S)
    assert blocks
    test = doctest.DocTestParser().get_doctest("\n".join(blocks), {}, "locate-periods.md", str(_DOC), 0)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS)
    runner.run(test)
    assert runner.failures == 0


@needs_docs
@pytest.mark.parametrize(("text", "options", "window", "precision", "flags"), _doc_rows() if _DOC.exists() else [])
def test_every_form_in_the_docs_reads_as_documented(text, options, window, precision, flags) -> None:
    kwargs: dict[str, object] = {}
    for item in filter(None, (part.strip() for part in options.split(","))):
        if item == "season_months":
            kwargs["season_months"] = _DOC_SEASONS
        else:
            key, value = item.split("=")
            kwargs[key] = value.strip("'")
    period = parse_period(text, **kwargs)  # type: ignore[arg-type]
    assert period is not None
    shown = f"{period.start} .. {period.end}" if period.start else "— (unresolved)"
    assert (shown, period.precision) == (window, precision)
    assert ", ".join(f"`{f}`" for f in period.flags) == flags


def test_invisible_characters_in_dates_are_ignored() -> None:
    p = parse_period("Mar\u200b 2001\u2060")
    assert (p.start, p.end) == (dt.date(2001, 3, 1), dt.date(2001, 3, 31))
