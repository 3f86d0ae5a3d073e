"""What one key of the project file allows: :class:`KeySpec` and the small checks keys share.

:mod:`envlink.project.schema` lists every section's keys as :class:`KeySpec` objects;
the checks here (a value among fixed choices, a whole number, a range of steps, a
GeoTIFF's band dates) are the ones several keys use.
"""

from __future__ import annotations

import datetime
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from envlink.errors import InputError

__all__ = ["KeySpec", "in_choices", "choice_words", "whole", "steps_ok", "band_dates_ok"]


@dataclass(frozen=True)
class KeySpec:
    """One key: its kind, what it allows (in words), whether it is required, a checker.

    ``words`` may be a function, read when a message is made: a key checked by a
    registry (``STATISTICS.accepts``) names the registry's names of that moment
    (``STATISTICS.allowed``), entries registered later included.
    """

    kind: str  # "str", "number", "bool", "list[str]", "table", "str|number", "str|list"
    words: str | Callable[[], str]
    required: bool = False
    check: Callable[[Any], bool] | None = None
    explain: Callable[[Any], str] | None = None  # more words on a refused value ("" for none)

    @property
    def allowed(self) -> str:
        """What the key allows, in words."""
        return self.words() if callable(self.words) else self.words


def in_choices(choices: tuple[str, ...]) -> Callable[[Any], bool]:
    """A check: the value is one of ``choices``."""
    return lambda v: v in choices


def choice_words(choices: tuple[str, ...]) -> str:
    """``one of 'a', 'b'``.

    Examples
    --------
    >>> choice_words(("D", "M"))
    "one of 'D', 'M'"
    """
    return "one of " + ", ".join(repr(c) for c in choices)


def whole(low: int | None) -> Callable[[Any], bool]:
    """A check: a whole number (not a bool), at least ``low`` when given."""
    return lambda v: isinstance(v, int) and not isinstance(v, bool) and (low is None or v >= low)


def steps_ok(low: int) -> Callable[[Any], bool]:
    """A check: lags or spans as :func:`envlink.extract.family.read_steps` reads them."""
    from envlink.extract.family import read_steps

    def ok(v: Any) -> bool:
        try:
            read_steps(v, "steps", low=low)
        except InputError:
            return False
        return True

    return ok


def band_dates_ok(value: Any) -> bool:
    """A text, or a list of dates (text or TOML dates) or of [start, end] pairs."""
    def date(v: Any) -> bool:
        return isinstance(v, str | datetime.date)

    if isinstance(value, str):
        return bool(value.strip())
    return bool(value) and all(date(v) or (isinstance(v, list) and len(v) == 2 and all(map(date, v)))
                               for v in value)  # fmt: skip
