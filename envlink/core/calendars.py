"""CF calendar names (CF Conventions v1.11 §4.4.1): the accepted names and their canonical form.

Grids (decoding time axes) and extraction (calendar-aware day numbers) read the
names from here, so both accept and canonicalise exactly the same spellings.
"""

from __future__ import annotations

__all__ = ["CF_CALENDARS", "STANDARD_CALENDARS", "canonical_calendar"]

#: Calendars of CF v1.11 §4.4.1 (``none`` is not accepted: it carries no dates).
CF_CALENDARS = (
    "standard",
    "gregorian",
    "proleptic_gregorian",
    "julian",
    "noleap",
    "365_day",
    "all_leap",
    "366_day",
    "360_day",
)
#: Calendars whose dates are those of numpy's proleptic Gregorian ``datetime64``.
STANDARD_CALENDARS = ("standard", "gregorian", "proleptic_gregorian")

_SYNONYMS = {"365_day": "noleap", "366_day": "all_leap", "none": "standard", "": "standard"}


def canonical_calendar(calendar: str | None) -> str:
    """The one name of a calendar's arithmetic: ``365_day`` -> ``noleap``, etc.

    The three Gregorian names stay as they are (they differ only before 1582, which
    the proleptic day numbers of :mod:`envlink.extract.calendars` already handle).

    Examples
    --------
    >>> canonical_calendar("365_day"), canonical_calendar(None), canonical_calendar("360_DAY")
    ('noleap', 'standard', '360_day')
    """
    c = (calendar or "standard").strip().lower()
    return _SYNONYMS.get(c, c)
