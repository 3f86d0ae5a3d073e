"""Period text (reported sampling dates) to an inclusive window of days, with precision and QA flags.

Entry points: :func:`parse_period` for one cell holding the whole period,
:func:`parse_period_columns` for separate start and end columns, :func:`is_missing`
for the markers read as "no date given".

Accepted forms (see ``docs/locate-periods.md`` for every form with its window): ISO 8601
dates, reduced dates, week and ordinal dates, date-times (the date part as written; the
time zone is ignored), ISO 8601 time intervals (start/end, start/duration,
duration/end); written dates (``15 March 2011``, ``March 15, 2011``, ``15-Mar-2011``);
numeric dates (``05/06/2011``); ranges of days, months and years; seasons; split years
(``2011/12``); vague qualifiers (``mid-2014``).

Policies: windows are inclusive dates; a period the text states but does not resolve
(``05/06/2011`` without a day/month order, ``summer 2010`` at a southern site) gives a
:class:`Period` with ``start=end=None`` and a flag and a note giving the readings; an
unreadable or impossible text raises :class:`PeriodError`; missing markers give ``None``.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections.abc import Mapping, Sequence
from typing import Any, Literal

from envlink.errors import param_error
from envlink.locate._periodread import read_text
from envlink.locate._periodtext import UNIT_RANK, Period, PeriodError, Precision
from envlink.locate._seasons import check_mapping

__all__ = [
    "Precision",
    "Period",
    "PeriodError",
    "parse_period",
    "parse_period_columns",
    "is_missing",
    "MISSING_MARKERS",
]

#: texts read as "no date given" (compared after stripping, lower-casing and
#: dropping surrounding brackets)
MISSING_MARKERS = frozenset({
    "", "na", "n/a", "n.a.", "n.a", "nan", "nat", "none", "null", "nil", "nd", "n.d.", "n.d",
    "n/d", "no date", "not dated", "undated", "unknown", "unk", "unk.", "not known",
    "not reported", "nr", "n.r.", "not stated", "not given", "missing", "-", "--", "---",
    "?", "??", "???", ".",
})


def is_missing(text: object) -> bool:
    """Whether a cell means "no date given": blank, ``None``, NaN/NA, or a missing marker.

    Markers (case-insensitive, surrounding brackets ignored) are listed in
    :data:`MISSING_MARKERS`: ``n.d.``, ``nd``, ``unknown``, ``NA``, ``N/A``, ``-``, ``?``,
    ``not reported``, ...

    Examples
    --------
    >>> [is_missing(v) for v in ("n.d.", " ", None, float("nan"), "(unknown)", "2011")]
    [True, True, True, True, True, False]
    """
    if text is None:
        return True
    if type(text).__name__ in ("NAType", "NaTType"):
        return True
    if isinstance(text, float):
        return math.isnan(text)
    if not isinstance(text, str):
        return False
    word = text.strip().lower()
    word = re.sub(r"^[(\[](.*)[)\]]$", r"\1", word).strip()
    return word in MISSING_MARKERS


def _text_of(value: object, field: str) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        raise PeriodError(field, "expected date text, got a boolean", "unreadable_period", repr(value))
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, dt.datetime):
        return value.date().isoformat()
    if isinstance(value, dt.date):
        return value.isoformat()
    raise PeriodError(
        field, f"expected date text, got {type(value).__name__} {value!r}", "unreadable_period", repr(value)
    )


def _check_options(hemisphere: Any, order: Any, plain_season_south: Any) -> None:
    if hemisphere not in (None, "north", "south"):
        raise param_error("hemisphere", "parse_period", "'north', 'south' or None", hemisphere)
    if order not in (None, "dayfirst", "monthfirst"):
        raise param_error("order", "parse_period", "'dayfirst', 'monthfirst' or None", order)
    if plain_season_south not in ("ambiguous", "austral", "boreal"):
        raise param_error(
            "plain_season_south", "parse_period", "'ambiguous', 'austral' or 'boreal'", plain_season_south
        )


def parse_period(
    text: object,
    *,
    hemisphere: Literal["north", "south"] | None = None,
    order: Literal["dayfirst", "monthfirst"] | None = None,
    plain_season_south: Literal["ambiguous", "austral", "boreal"] = "ambiguous",
    season_months: Mapping[str, Sequence[int]] | None = None,
) -> Period | None:
    """Read a reported period into an inclusive window of days.

    Parameters
    ----------
    text : str
        The period as written: ``2011-03-05``, ``March 2011``, ``3-9 March 2011``,
        ``Jul-Sep 2012``, ``2008-2010``, ``2013-04-01/P3M``, ``austral summer 2011/12``,
        ``DJF 2012``, ``mid-2014``, ``05/06/2011``, ... (every form in
        ``docs/locate-periods.md``). Integers (``2011``) and ``datetime.date`` are read too.
    hemisphere : {'north', 'south'} or None
        The site's hemisphere, used only for plain seasons (``summer 2010``).
    order : {'dayfirst', 'monthfirst'} or None
        How to read numeric dates such as ``05/06/2011``; without it they are flagged
        ``ambiguous_day_month`` unless a field is > 12 or both are equal.
    plain_season_south : {'ambiguous', 'austral', 'boreal'}
        How a plain season at a southern site is read: left unresolved and flagged
        ``ambiguous_season`` (default), or as the austral or boreal season.
    season_months : mapping of str to sequence of int, optional
        Months of named seasons, e.g. ``{'wet': [11, 12, 1, 2, 3, 4]}``. The only way
        wet/dry (and other regional) seasons are read. A season crossing the year end
        belongs to the year of its January.

    Returns
    -------
    Period or None
        ``None`` when the text is a missing marker (:func:`is_missing`).

    Raises
    ------
    PeriodError
        Unreadable text, an impossible date, an end before the start, a season without
        months. ``field``, ``reason`` and ``code`` say which and why.

    Examples
    --------
    >>> p = parse_period("3-9 March 2011")
    >>> p.start, p.end, p.precision
    (datetime.date(2011, 3, 3), datetime.date(2011, 3, 9), 'day')
    >>> parse_period("austral summer 2012").end
    datetime.date(2012, 2, 29)
    >>> parse_period("05/06/2011").flags
    ('ambiguous_day_month',)
    >>> parse_period("05/06/2011", order="dayfirst").start
    datetime.date(2011, 6, 5)
    >>> parse_period("n.d.") is None
    True
    """
    return _parse(text, "period", hemisphere, order, plain_season_south, season_months)


def _parse(
    text: object, field: str, hemisphere: Any, order: Any, plain_season_south: Any,
    season_months: Mapping[str, Sequence[int]] | None,
) -> Period | None:
    _check_options(hemisphere, order, plain_season_south)
    if is_missing(text):
        return None
    raw = _text_of(text, field)
    mapping = tuple(sorted(check_mapping(season_months).items()))
    return read_text(raw, field, hemisphere, order, plain_season_south, mapping)


def parse_period_columns(start_text: object, end_text: object, **options: Any) -> Period | None:
    """Read a period given as separate start and end columns.

    Each value is read as :func:`parse_period` reads one cell (same keyword options);
    the window runs from the first day of the start's window to the last day of the
    end's window, and the precision is the coarser of the two (``'years'`` when a
    ``'year'`` window spans several years). Flags and notes of both are kept.

    Parameters
    ----------
    start_text, end_text : str
        The start and end as written; either may be a missing marker.
    **options
        ``hemisphere``, ``order``, ``plain_season_south``, ``season_months``.

    Returns
    -------
    Period or None
        ``None`` when both are missing. When only one is given the window is that
        value's own window, flagged ``start_missing`` or ``end_missing``.

    Raises
    ------
    PeriodError
        With ``field='start'`` or ``'end'`` for the value that cannot be read, and
        ``field='end'``, ``code='end_before_start'`` when the end precedes the start.

    Examples
    --------
    >>> p = parse_period_columns("March 2011", "2011-06-15")
    >>> p.start, p.end, p.precision
    (datetime.date(2011, 3, 1), datetime.date(2011, 6, 15), 'month')
    >>> parse_period_columns("2008", "2010").precision
    'years'
    """
    unknown = set(options) - {"hemisphere", "order", "plain_season_south", "season_months"}
    if unknown:
        raise param_error(
            sorted(unknown)[0], "parse_period_columns",
            "one of 'hemisphere', 'order', 'plain_season_south', 'season_months'",
            options[sorted(unknown)[0]],
        )
    args = (options.get("hemisphere"), options.get("order"),
            options.get("plain_season_south", "ambiguous"), options.get("season_months"))
    first = _parse(start_text, "start", *args)
    last = _parse(end_text, "end", *args)
    if first is None or last is None:
        if first is None and last is None:
            return None
        given, flag, side = (last, "start_missing", "start") if first is None else (first, "end_missing", "end")
        assert given is not None
        note = f"the {side} is missing; the window is the {'end' if side == 'start' else 'start'} value's own"
        return Period(given.start, given.end, given.precision, (*given.flags, flag), (*given.notes, note))
    flags = tuple(dict.fromkeys((*first.flags, *last.flags)))
    notes = tuple(dict.fromkeys((*first.notes, *last.notes)))
    units: list[Precision] = [u for u in (first.precision, last.precision) if u is not None]
    coarser: Precision | None = max(units, key=lambda u: UNIT_RANK[str(u)]) if units else None
    if first.start is None or last.end is None:
        return Period(None, None, coarser, flags, notes)
    if last.end < first.start:
        raise PeriodError(
            "end", f"the end {last.end} is before the start {first.start} ({_text_of(start_text, 'start')!r})",
            "end_before_start", _text_of(end_text, "end"),
        )
    if coarser == "year" and first.start.year != last.end.year:
        coarser = "years"
    return Period(first.start, last.end, coarser, flags, notes)
