"""Seasons of the period reader: meteorological quarters, hemispheres and user month mappings.

Private to :mod:`envlink.locate.periods`. A season is a run of consecutive months; one
that crosses the year end (``Dec-Feb``, a ``Nov-Apr`` wet season) belongs to the year of
its January, so ``DJF 2012`` and ``austral summer 2012`` are 2011-12-01..2012-02-29.
"""

from __future__ import annotations

import datetime as dt
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

from envlink.errors import param_error
from envlink.locate._periodtext import MONTH_ABBR, PeriodError, month_end

Hemisphere = Literal["north", "south"]
PlainSouth = Literal["ambiguous", "austral", "boreal"]

#: meteorological quarters (common practice: WMO-style three-month seasons)
SEASON_CODES: dict[str, tuple[int, ...]] = {
    "djf": (12, 1, 2), "mam": (3, 4, 5), "jja": (6, 7, 8), "son": (9, 10, 11),
}
BOREAL = {"winter": "djf", "spring": "mam", "summer": "jja", "autumn": "son", "fall": "son"}
AUSTRAL = {"summer": "djf", "autumn": "mam", "fall": "mam", "winter": "jja", "spring": "son"}
#: season words whose months differ by region: read only through a user month mapping
NEEDS_MAPPING = frozenset({
    "wet", "dry", "rainy", "monsoon", "monsoonal", "cool", "cold", "warm", "hot", "growing",
    "breeding", "spawning", "flood", "ice", "dry-season", "wet-season",
})
_HEMI_WORDS = {"austral": "austral", "southern": "austral", "boreal": "boreal", "northern": "boreal"}

_HEMI = r"(?:(?P<hemi>austral|boreal|southern|northern)(?: hemisphere)? )?"
_YEAR = r"(?P<year>\d{4})(?:[/-](?P<y2>\d{4}|\d{2}))?"
_WORD = r"(?P<word>[a-z][a-z\-]*?)(?P<season>[ -]season)?"
_SEASON_FORMS = (
    re.compile(r"(?:the )?" + _HEMI + _WORD + r"(?: of)? " + _YEAR),
    re.compile(_YEAR + " " + _HEMI + _WORD),
)


@dataclass(frozen=True)
class SeasonReading:
    """What a season text resolved to (``start``/``end`` are ``None`` when ambiguous)."""

    start: dt.date | None
    end: dt.date | None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def month_label(months: Sequence[int]) -> str:
    """``(12, 1, 2)`` -> ``'Dec-Feb'``."""
    return f"{MONTH_ABBR[months[0] - 1]}-{MONTH_ABBR[months[-1] - 1]}"


_INITIALS = "jfmamjjasond"


def month_initials(word: str) -> tuple[int, ...] | None:
    """Months of a code of consecutive month initials (``djf``, ``jfm``, ``ndjfma``).

    Common practice in climatology; a code must have 3 to 11 letters and occur once in
    the cycle of initials.

    >>> month_initials("djf"), month_initials("son"), month_initials("jam")
    ((12, 1, 2), (9, 10, 11), None)
    """
    if not 3 <= len(word) <= 11:
        return None
    cycle = _INITIALS * 2
    starts = {i % 12 for i in range(12) if cycle.startswith(word, i)}
    if len(starts) != 1:
        return None
    first = starts.pop()
    return tuple((first + k) % 12 + 1 for k in range(len(word)))


def check_mapping(season_months: Mapping[str, Sequence[int]] | None) -> dict[str, tuple[int, ...]]:
    """Validate a user season mapping and put each run of months in calendar order.

    >>> check_mapping({"Wet": [1, 2, 3, 4, 11, 12]})
    {'wet': (11, 12, 1, 2, 3, 4)}
    """
    if season_months is None:
        return {}
    allowed = ("a mapping of season names to a run of consecutive months 1-12, "
               "e.g. {'wet': [11, 12, 1, 2, 3, 4]}")
    if not isinstance(season_months, Mapping):
        raise param_error("season_months", "parse_period", allowed, season_months)
    out: dict[str, tuple[int, ...]] = {}
    for name, months in season_months.items():
        try:
            ms = [int(m) for m in months]
        except (TypeError, ValueError):
            raise param_error("season_months", "parse_period", allowed, dict(season_months)) from None
        run = set(ms)
        if (not isinstance(name, str) or not name.strip() or not ms or len(run) != len(ms)
                or not run <= set(range(1, 13))):
            raise param_error("season_months", "parse_period", allowed, dict(season_months))
        starts = [m for m in run if (m - 2) % 12 + 1 not in run] or [ms[0]]
        if len(starts) != 1:
            raise param_error("season_months", "parse_period", allowed, dict(season_months))
        ordered = tuple((starts[0] - 1 + i) % 12 + 1 for i in range(len(run)))
        key = re.sub(r"[ -]season$", "", name.strip().lower())
        out[key] = ordered
    return out


def season_window(
    months: Sequence[int], year: int, year2: int | None, label: str, text: str, field: str
) -> tuple[dt.date, dt.date]:
    """Window of a season in a year, or in a split year ``year/year2``.

    A season crossing the year end belongs to the year of its January; in a split year
    it is the one that crosses from ``year`` into ``year2``.
    """
    crosses = months[0] > months[-1]
    if year2 is not None:
        if not crosses:
            raise PeriodError(
                field,
                f"{label} ({month_label(months)}) lies within one calendar year, so the split "
                f"year {year}/{str(year2)[-2:]} does not say which year; write one year",
                "season_year_mismatch", text,
            )
        jan_year = year2
    else:
        jan_year = year
    first_year = jan_year - 1 if crosses else jan_year
    try:
        return dt.date(first_year, months[0], 1), month_end(dt.date(jan_year, months[-1], 1))
    except ValueError:
        raise PeriodError(field, f"year {year} is outside the calendar", "impossible_date", text) from None


def _split_year(year: int, y2: str | None, text: str, field: str) -> int | None:
    if y2 is None:
        return None
    second = int(y2) if len(y2) == 4 else (year // 100 * 100 + int(y2)) + (100 if int(y2) < year % 100 else 0)
    if second != year + 1:
        raise PeriodError(
            field, f"a split year names two consecutive years (e.g. {year}/{str(year + 1)[-2:]}); "
            f"got {year}/{y2}", "season_year_mismatch", text,
        )
    return second


def read_season(
    norm: str, text: str, field: str, *, hemisphere: Hemisphere | None, plain_south: PlainSouth,
    mapping: Mapping[str, tuple[int, ...]],
) -> SeasonReading | None:
    """Resolve a season text; ``None`` when the text is not a season form."""
    for pattern in _SEASON_FORMS:
        m = pattern.fullmatch(norm)
        if m is not None:
            break
    else:
        return None
    word, hemi = m.group("word"), m.group("hemi")
    year = int(m.group("year"))
    year2 = _split_year(year, m.group("y2"), text, field)
    if word in mapping:
        start, end = season_window(mapping[word], year, year2, f"the {word} season", text, field)
        return SeasonReading(start, end)
    code = month_initials(word)
    if code is not None:
        start, end = season_window(code, year, year2, word.upper(), text, field)
        return SeasonReading(start, end)
    if word in BOREAL:
        return _named_season(word, hemi, year, year2, text, field, hemisphere, plain_south)
    if word in NEEDS_MAPPING or m.group("season"):
        known = ", ".join(sorted(mapping)) or "none given"
        raise PeriodError(
            field,
            f"the {word!r} season has no fixed months; give them through season_months "
            f"(--season-months on the command line; e.g. {{'{word}': [11, 12, 1, 2, 3, 4]}}; "
            f"seasons mapped: {known})",
            "season_needs_mapping", text,
        )
    return None


def _named_season(
    word: str, hemi: str | None, year: int, year2: int | None, text: str, field: str,
    hemisphere: Hemisphere | None, plain_south: PlainSouth,
) -> SeasonReading:
    tables = {"boreal": BOREAL, "austral": AUSTRAL}
    if hemi is not None:
        side = _HEMI_WORDS[hemi]
        months = SEASON_CODES[tables[side][word]]
        return SeasonReading(*season_window(months, year, year2, f"{side} {word}", text, field))
    if year2 is not None:
        crossing = [side for side in ("boreal", "austral") if SEASON_CODES[tables[side][word]][0] == 12]
        if not crossing:
            months = SEASON_CODES[BOREAL[word]]
            season_window(months, year, year2, word, text, field)  # raises season_year_mismatch
        side = crossing[0]
        start, end = season_window(SEASON_CODES[tables[side][word]], year, year2, word, text, field)
        note = (f"{text.strip()!r} read as the {side} {word} (Dec-Feb) because the split year "
                f"{year}/{str(year2)[-2:]} names a season across the year end")
        return SeasonReading(start, end, ("season_by_split_year",), (note,))
    readings = {
        side: season_window(SEASON_CODES[tables[side][word]], year, None, f"{side} {word}", text, field)
        for side in ("boreal", "austral")
    }
    chosen: str | None = None
    flag = "season_by_hemisphere"
    if hemisphere == "north":
        chosen = "boreal"
    elif hemisphere == "south" and plain_south != "ambiguous":
        chosen = plain_south
        flag = "season_by_hemisphere" if plain_south == "austral" else "season_by_option"
    if chosen is None:
        where = "a southern site" if hemisphere == "south" else "a site of unknown hemisphere"
        both = " or ".join(
            f"the {side} {word} ({month_label(SEASON_CODES[tables[side][word]])}: "
            f"{readings[side][0]}..{readings[side][1]})" for side in ("boreal", "austral")
        )
        note = (f"{text.strip()!r} at {where} reads as {both}; write 'austral' or 'boreal', "
                "or say how plain seasons are read at southern sites (plain_season_south='austral' "
                "or 'boreal'; --plain-season-south on the command line)")
        return SeasonReading(None, None, ("ambiguous_season",), (note,))
    start, end = readings[chosen]
    why = ("for a northern site" if hemisphere == "north"
           else f"for a southern site (plain_season_south={plain_south!r}; "
                f"--plain-season-south {plain_south} on the command line)")
    note = (f"{text.strip()!r} read as the {chosen} {word} "
            f"({month_label(SEASON_CODES[tables[chosen][word]])}) {why}")
    return SeasonReading(start, end, (flag,), (note,))
