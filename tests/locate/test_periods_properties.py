"""Property tests: random dates and ranges written in every supported form read back exactly.

Independent references: Python's ``datetime`` and ``calendar`` (ISO calendar, ordinal
days, month lengths, leap years) and ``dateutil.relativedelta`` for month and year
steps of ISO 8601 durations (it clips the day to the month's length, the common
practice envlink follows). "Exactly" means within the form's precision: a month form
gives the whole month, a year form the whole year.
"""

from __future__ import annotations

import calendar
import datetime as dt

from dateutil.relativedelta import relativedelta
from hypothesis import given, settings
from hypothesis import strategies as st

from envlink.locate.periods import MISSING_MARKERS, PeriodError, parse_period, parse_period_columns

#: applied per test, so other modules' hypothesis settings are left alone
PROFILE = settings(max_examples=150, deadline=None)

DAYS = st.dates(min_value=dt.date(1800, 1, 1), max_value=dt.date(2199, 12, 31))
YEARS = st.integers(min_value=1800, max_value=2199)
MONTHS = st.integers(min_value=1, max_value=12)
DASHES = st.sampled_from(["-", " - ", "–", " – ", "—", " to "])
CASE = st.sampled_from([str, str.lower, str.upper])


def month_window(year: int, month: int) -> tuple[dt.date, dt.date]:
    return dt.date(year, month, 1), dt.date(year, month, calendar.monthrange(year, month)[1])


def month_word(month: int, style: str) -> str:
    name = calendar.month_name[month]
    return {"full": name, "abbr": calendar.month_abbr[month], "dot": calendar.month_abbr[month] + "."}[style]


STYLES = st.sampled_from(["full", "abbr", "dot"])


def window(text: str, **options: object) -> tuple[dt.date | None, dt.date | None, str | None]:
    period = parse_period(text, **options)  # type: ignore[arg-type]
    assert period is not None, text
    return period.start, period.end, period.precision


@st.composite
def day_texts(draw: st.DrawFn) -> tuple[str, dt.date, dict[str, str]]:
    d = draw(DAYS)
    iso_year, iso_week, iso_day = d.isocalendar()
    tz = draw(st.sampled_from(["", "Z", "+02:00", "-0530"]))
    hms = f"{draw(st.integers(0, 23)):02d}:{draw(st.integers(0, 59)):02d}:{draw(st.integers(0, 59)):02d}"
    word = draw(CASE)(month_word(d.month, draw(STYLES)))
    sep = draw(st.sampled_from(["/", ".", "-"]))
    forms = [
        (d.isoformat(), {}),
        (d.strftime("%Y%m%d"), {}),
        (f"{d.year}-{d.timetuple().tm_yday:03d}", {}),
        (f"{iso_year}-W{iso_week:02d}-{iso_day}", {}),
        (f"{d.isoformat()}T{hms}{tz}", {}),
        (f"{d.isoformat()} {hms[:5]}", {}),
        (f"{d.day} {word} {d.year}", {}),
        (f"{word} {d.day}, {d.year}", {}),
        (f"{d.day:02d}-{calendar.month_abbr[d.month]}-{d.year}", {}),
        (f"{d.day:02d}{sep}{d.month:02d}{sep}{d.year}", {"order": "dayfirst"}),
        (f"{d.month}{sep}{d.day}{sep}{d.year}", {"order": "monthfirst"}),
        (f"{d.year}/{d.month:02d}/{d.day:02d}", {}),
    ]
    text, options = draw(st.sampled_from(forms))
    return text, d, options


@PROFILE
@given(day_texts())
def test_every_day_form_reads_back(case: tuple[str, dt.date, dict[str, str]]) -> None:
    text, day, options = case
    assert window(text, **options) == (day, day, "day")


@PROFILE
@given(DAYS, st.sampled_from(["/", ".", "-"]))
def test_numeric_dates_without_order_resolve_only_when_the_text_decides(day: dt.date, sep: str) -> None:
    text = f"{day.day:02d}{sep}{day.month:02d}{sep}{day.year}"
    period = parse_period(text)
    assert period is not None
    if day.day > 12 or day.day == day.month:
        assert (period.start, period.end, period.flags) == (day, day, ())
    else:
        assert (period.start, period.end, period.flags) == (None, None, ("ambiguous_day_month",))
        swapped = dt.date(day.year, day.day, day.month)
        assert str(day) in period.notes[0] and str(swapped) in period.notes[0]


@PROFILE
@given(YEARS, MONTHS, STYLES, CASE, st.integers(0, 3))
def test_every_month_form_gives_the_whole_month(year: int, month: int, style: str, case, form: int) -> None:
    word = case(month_word(month, style))
    text = [f"{year}-{month:02d}", f"{word} {year}", f"{calendar.month_abbr[month]}-{year}",
            f"{month:02d}/{year}"][form]
    assert window(text) == (*month_window(year, month), "month")


@PROFILE
@given(YEARS)
def test_a_year_gives_the_whole_year(year: int) -> None:
    assert window(str(year)) == (dt.date(year, 1, 1), dt.date(year, 12, 31), "year")


@PROFILE
@given(DAYS, st.integers(0, 400), DASHES, STYLES, st.integers(0, 4))
def test_day_ranges_read_back(first: dt.date, length: int, dash: str, style: str, form: int) -> None:
    last = first + dt.timedelta(days=length)
    if last.year > 2199:
        return
    w1, w2 = month_word(first.month, style), month_word(last.month, style)
    if form == 0:
        text = f"{first.isoformat()}/{last.isoformat()}"
    elif form == 1:
        text = f"{first.isoformat()}{dash}{last.isoformat()}"
    elif form == 2:
        text = f"{first.day} {w1} {first.year}{dash}{last.day} {w2} {last.year}"
    elif form == 3 and first.year == last.year:
        text = f"{first.day} {w1}{dash}{last.day} {w2} {last.year}"
    elif form == 4 and (first.year, first.month) == (last.year, last.month):
        text = f"{first.day}{dash}{last.day} {w2} {last.year}"
    else:
        text = f"{w1} {first.day}, {first.year}{dash}{w2} {last.day}, {last.year}"
    assert window(text) == (first, last, "day")


@PROFILE
@given(YEARS, MONTHS, st.integers(0, 30), DASHES, STYLES, st.integers(0, 2))
def test_month_ranges_give_whole_months(year: int, month: int, extra: int, dash: str, style: str, form: int) -> None:
    index = year * 12 + month - 1 + extra
    y2, m2 = divmod(index, 12)
    m2 += 1
    start, end = month_window(year, month)[0], month_window(y2, m2)[1]
    w1, w2 = month_word(month, style), month_word(m2, style)
    if form == 0 and y2 == year:
        text = f"{w1}{dash}{w2} {year}"
    elif form == 1:
        text = f"{year}-{month:02d}/{y2}-{m2:02d}"
    else:
        text = f"{w1} {year}{dash}{w2} {y2}"
    assert window(text) == (start, end, "month")


@PROFILE
@given(YEARS, st.integers(1, 40), DASHES)
def test_year_ranges_give_whole_years(first: int, span: int, dash: str) -> None:
    last = first + span
    assert window(f"{first}{dash}{last}") == (dt.date(first, 1, 1), dt.date(last, 12, 31), "years")


@PROFILE
@given(DAYS, st.integers(1, 500), st.sampled_from(["D", "W", "M", "Y"]))
def test_start_and_duration_end_the_day_before_the_step(start: dt.date, n: int, unit: str) -> None:
    # Reference: dateutil.relativedelta for month and year steps (day clipped to the month).
    step = {"D": relativedelta(days=n), "W": relativedelta(weeks=n), "M": relativedelta(months=n),
            "Y": relativedelta(years=n % 60 + 1)}[unit]
    count = n % 60 + 1 if unit == "Y" else n
    end = start + step - dt.timedelta(days=1)
    if end.year > 9000:
        return
    precision = "day"
    assert window(f"{start.isoformat()}/P{count}{unit}") == (start, end, precision)


@PROFILE
@given(DAYS, st.integers(1, 500), st.sampled_from(["D", "M"]))
def test_duration_and_end_start_one_step_before_the_next_day(end: dt.date, n: int, unit: str) -> None:
    step = relativedelta(days=n) if unit == "D" else relativedelta(months=n)
    start = end + dt.timedelta(days=1) - step
    if start.year < 1:
        return
    assert window(f"P{n}{unit}/{end.isoformat()}") == (start, end, "day")


SEASONS = {
    # (hemisphere word, season word) -> months; common practice (meteorological seasons)
    ("boreal", "winter"): (12, 1, 2), ("boreal", "spring"): (3, 4, 5), ("boreal", "summer"): (6, 7, 8),
    ("boreal", "autumn"): (9, 10, 11), ("austral", "summer"): (12, 1, 2), ("austral", "autumn"): (3, 4, 5),
    ("austral", "winter"): (6, 7, 8), ("austral", "spring"): (9, 10, 11),
}


def season_reference(months: tuple[int, ...], year: int) -> tuple[dt.date, dt.date]:
    first_year = year - 1 if months[0] == 12 else year
    return dt.date(first_year, months[0], 1), month_window(year, months[-1])[1]


@PROFILE
@given(st.sampled_from(sorted(SEASONS)), YEARS, CASE)
def test_explicit_seasons(key: tuple[str, str], year: int, case) -> None:
    months = SEASONS[key]
    assert window(case(f"{key[0]} {key[1]} {year}")) == (*season_reference(months, year), "season")
    code = "".join(calendar.month_abbr[m][0] for m in months)
    assert window(f"{code} {year}") == (*season_reference(months, year), "season")


@PROFILE
@given(st.sampled_from(["winter", "spring", "summer", "autumn"]), YEARS)
def test_plain_seasons_follow_the_hemisphere_option(word: str, year: int) -> None:
    north = parse_period(f"{word} {year}", hemisphere="north")
    assert north is not None and (north.start, north.end) == season_reference(SEASONS["boreal", word], year)
    assert north.flags == ("season_by_hemisphere",)
    south = parse_period(f"{word} {year}", hemisphere="south")
    assert south is not None and (south.start, south.flags) == (None, ("ambiguous_season",))
    austral = parse_period(f"{word} {year}", hemisphere="south", plain_season_south="austral")
    assert austral is not None and (austral.start, austral.end) == season_reference(SEASONS["austral", word], year)


@PROFILE
@given(st.lists(MONTHS, min_size=1, max_size=12, unique=True), YEARS)
def test_mapped_seasons(months: list[int], year: int) -> None:
    run = set(months)
    starts = [m for m in run if (m - 2) % 12 + 1 not in run]
    if len(starts) > 1:
        return  # not one run of consecutive months
    first = starts[0] if starts else months[0]
    ordered = [(first - 1 + i) % 12 + 1 for i in range(len(run))]
    crosses = ordered[0] > ordered[-1]
    expected = (dt.date(year - 1 if crosses else year, ordered[0], 1), month_window(year, ordered[-1])[1])
    assert window(f"wet season {year}", season_months={"wet": months}) == (*expected, "season")


@PROFILE
@given(day_texts(), day_texts())
def test_separate_columns_span_from_first_to_second(a, b) -> None:
    (ta, da, oa), (tb, db, ob) = sorted([a, b], key=lambda c: c[1])
    if oa and ob and oa != ob:
        return  # one order option applies to both columns
    period = parse_period_columns(ta, tb, **(oa or ob))
    assert period is not None and (period.start, period.end, period.precision) == (da, db, "day")


@PROFILE
@given(st.sampled_from(sorted(MISSING_MARKERS)), CASE, st.sampled_from(["", " ", "\t"]))
def test_missing_markers_in_any_case(marker: str, case, pad: str) -> None:
    assert parse_period(pad + case(marker) + pad) is None


@PROFILE
@given(st.text(alphabet="0123456789-/.: ,TWPYMDHSZ+JanFebMrSeptOcNovDumwinterspAlbo?~", max_size=30))
def test_any_text_gives_a_period_none_or_a_period_error(text: str) -> None:
    # No other exception may escape: a user never sees a traceback.
    try:
        period = parse_period(text)
    except PeriodError as err:
        assert err.reason and err.code
        return
    if period is not None and period.start is not None:
        assert period.end is not None and period.start <= period.end


@PROFILE
@given(st.integers(180, 219), st.integers(1, 4), YEARS, st.booleans())
def test_decades_and_quarters(decade: int, quarter: int, year: int, year_first: bool) -> None:
    assert window(f"{decade * 10}s") == (dt.date(decade * 10, 1, 1), dt.date(decade * 10 + 9, 12, 31), "years")
    text = f"{year}-Q{quarter}" if year_first else f"Q{quarter} {year}"
    first = dt.date(year, 3 * quarter - 2, 1)
    assert window(text) == (first, month_window(year, 3 * quarter)[1], "month")


@PROFILE
@given(day_texts(), st.sampled_from(["mid-", "early ", "late ", "ca. ", "around ", "c. ", "~"]))
def test_a_vague_qualifier_gives_a_superset_window(case, qualifier: str) -> None:
    # Policy: the whole containing unit (a day widens to its month), never a guessed part.
    text, day, options = case
    period = parse_period(qualifier + text, **options)  # type: ignore[arg-type]
    assert period is not None and period.flags == ("vague_qualifier",)
    assert (period.start, period.end) == month_window(day.year, day.month)
