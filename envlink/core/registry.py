"""Registries: one home for each vocabulary a user can name (rules, statistics, methods, formats).

A :class:`Registry` maps names to :class:`Entry` objects. The Python API, the command
line (its choices and ``--help``), the project file's schema and the docs' tables all
read the same registry, so a name is accepted or refused alike everywhere, and adding
one means registering one entry in the module that owns the vocabulary.

Spelling policy (the same in every vocabulary and every interface):

- names are case-insensitive, and ``-`` and ``_`` are the same character
  (``Nearest-Valid``, ``nearest_valid`` and ``nearest-valid`` are one rule);
- surrounding white space is ignored, around the name and around its argument;
- an argument follows a colon (``quantile:0.9``, ``lag:3M``, ``buffer:25km``) and is
  read by the entry's :class:`Arg`: numbers in any decimal form (``.5`` = ``0.5`` =
  ``5e-1``), distances with an optional ``km``, durations ``N`` + ``D``, ``M`` or ``Y``
  (either case);
- an entry may have aliases (e.g. the trade's abbreviations), spelled the same way;
- every choice has one canonical label (:meth:`Choice.label`) that outputs record.

Examples
--------
>>> reg = Registry("colour", param="colour", caller="paint")
>>> _ = reg.add(Entry("deep-blue", "a dark blue", aliases=("navy",)))
>>> _ = reg.add(Entry("grey", "a grey of lightness L", arg=Arg.number("L", low=0, high=1)))
>>> reg.parse("Deep_Blue").label(), reg.parse(" NAVY ").label(), reg.parse("grey:.5").label()
('deep-blue', 'deep-blue', 'grey:0.5')
>>> reg.accepts("grey:2"), reg.accepts("gray:0.5")
(False, False)
>>> reg.parse("gray:0.5")
Traceback (most recent call last):
...
envlink.errors.InputError: The 'colour' parameter of paint must be one of 'deep-blue', 'grey:L'; got 'gray:0.5'. Did you mean 'grey'?
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field, replace
from typing import Any, Generic, TypeVar

from envlink.core.util import did_you_mean
from envlink.errors import InputError, param_error

__all__ = ["Arg", "Entry", "Choice", "Registry", "norm_name", "read_number"]

T = TypeVar("T")


def norm_name(text: str) -> str:
    """The lookup key of a name: stripped, lower case, ``_`` read as ``-``.

    Examples
    --------
    >>> norm_name("  Nearest_Valid ")
    'nearest-valid'
    """
    return text.strip().lower().replace("_", "-")


def read_number(text: str) -> float | None:
    """A finite float from text (``.5``, ``0.5``, ``5e-1``), or None.

    Examples
    --------
    >>> read_number(".5"), read_number("inf"), read_number("x")
    (0.5, None, None)
    """
    try:
        x = float(text.strip())
    except (TypeError, ValueError, AttributeError):
        return None
    return x if math.isfinite(x) else None


_DURATION = re.compile(r"\s*(\d+)\s*([dmyDMY])\s*")
_DISTANCE = re.compile(r"\s*([^\s]+?)\s*(km)?\s*", re.IGNORECASE)


@dataclass(frozen=True)
class Arg:
    """The argument written after a name's colon: its form, how to read it, how to print it.

    Attributes
    ----------
    form : str
        The placeholder shown in messages and docs (``Q``, ``T``, ``Dkm``, ``N{D|M|Y}``).
    read : callable
        Text -> value; returns None when the text is not a valid argument.
    show : callable
        Value -> canonical text.
    expected : str
        Plain words for the message when :attr:`read` fails.
    optional : bool
        Whether the name may be given without its argument (the value is then None
        and the caller supplies it another way, e.g. ``threshold=``).
    """

    form: str
    read: Callable[[str], Any]
    show: Callable[[Any], str]
    expected: str
    optional: bool = False

    @classmethod
    def number(cls, form: str, *, low: float | None = None, high: float | None = None,
               positive: bool = False, expected: str | None = None,
               optional: bool = False) -> Arg:
        """A number, optionally bounded (inclusive ``low``/``high``) or strictly positive."""

        def read(text: str) -> float | None:
            x = read_number(text)
            if x is None or (low is not None and x < low) or (high is not None and x > high):
                return None
            return None if positive and x <= 0 else x

        words = expected or (
            f"{form} a number" + (f" from {low:g} to {high:g}" if low is not None and high is not None
                                  else " > 0" if positive else "")
        )
        return cls(form, read, lambda x: f"{x:g}", words, optional)

    @classmethod
    def distance_km(cls, form: str = "D") -> Arg:
        """A positive distance in km; the ``km`` unit is optional (``25``, ``25km``, ``25 KM``)."""

        def read(text: str) -> float | None:
            m = _DISTANCE.fullmatch(text)
            x = read_number(m.group(1)) if m else None
            return x if x is not None and x > 0 else None

        return cls(f"{form}km", read, lambda x: f"{x:g}km", f"{form} a positive distance in km")

    @classmethod
    def duration(cls) -> Arg:
        """A whole positive number of days, months or years: ``90D``, ``3M``, ``1y``."""

        def read(text: str) -> tuple[int, str] | None:
            m = _DURATION.fullmatch(text)
            if not m or int(m.group(1)) <= 0:
                return None
            return int(m.group(1)), m.group(2).upper()

        return cls("N{D|M|Y}", read, lambda v: f"{v[0]}{v[1]}",
                   "N a positive whole number followed by D, M or Y (e.g. 3M)")


@dataclass(frozen=True)
class Entry(Generic[T]):
    """One name of a vocabulary.

    Attributes
    ----------
    name : str
        The canonical name (lower case, words joined by ``-`` or ``_`` as the
        vocabulary writes them).
    summary : str
        One line for ``--help`` and the docs' table.
    obj : object
        What the name stands for in the owning stage (a rule object, a function...).
    arg : Arg, optional
        The argument after a colon; None when the name takes none.
    aliases : tuple of str
        Other accepted spellings (e.g. the trade's abbreviations).
    info : dict
        Facts other code reads (units rule, needs a baseline, input roles...).
    """

    name: str
    summary: str
    obj: T | None = None
    arg: Arg | None = None
    aliases: tuple[str, ...] = ()
    info: dict[str, Any] = field(default_factory=dict)

    @property
    def form(self) -> str:
        """How the name is written with its argument, e.g. ``quantile:Q``."""
        if self.arg is None:
            return self.name
        return f"{self.name}[:{self.arg.form}]" if self.arg.optional else f"{self.name}:{self.arg.form}"


@dataclass(frozen=True)
class Choice(Generic[T]):
    """A parsed name: the :class:`Entry` and the value of its argument (or None)."""

    entry: Entry[T]
    value: Any = None

    @property
    def name(self) -> str:
        """The canonical name."""
        return self.entry.name

    def label(self) -> str:
        """The canonical text, e.g. ``'quantile:0.5'`` for ``'Quantile:.5'``."""
        if self.entry.arg is None or self.value is None:
            return self.entry.name
        return f"{self.entry.name}:{self.entry.arg.show(self.value)}"

    def with_value(self, value: Any) -> Choice[T]:
        """The same choice with another argument value."""
        return replace(self, value=value)


class Registry(Generic[T]):
    """A vocabulary: names -> :class:`Entry`, with one spelling policy and one message.

    Parameters
    ----------
    vocabulary : str
        What the names are, in words (``"spatial rule"``), for docs and messages.
    param : str
        The Python parameter that takes a name (``"spatial"``).
    caller : str
        The function named in parameter messages (``"attach"``).
    """

    def __init__(self, vocabulary: str, *, param: str, caller: str) -> None:
        self.vocabulary = vocabulary
        self.param = param
        self.caller = caller
        self._entries: dict[str, Entry[T]] = {}
        self._keys: dict[str, str] = {}

    # ------------------------------------------------------------- building
    def add(self, entry: Entry[T]) -> Entry[T]:
        """Register ``entry`` (its name and aliases must be new); return it."""
        for spelling in (entry.name, *entry.aliases):
            key = norm_name(spelling)
            if key in self._keys:
                raise ValueError(f"{self.vocabulary} {spelling!r} is registered twice")
            self._keys[key] = entry.name
        self._entries[entry.name] = entry
        return entry

    def remove(self, name: str) -> None:
        """Unregister a name and its aliases (for tests that register a toy entry)."""
        entry = self._entries.pop(self[name].name)
        for spelling in (entry.name, *entry.aliases):
            self._keys.pop(norm_name(spelling), None)

    # -------------------------------------------------------------- reading
    def __iter__(self) -> Iterator[Entry[T]]:
        return iter(list(self._entries.values()))

    def __len__(self) -> int:
        return len(self._entries)

    def __contains__(self, name: object) -> bool:
        return isinstance(name, str) and norm_name(name.partition(":")[0]) in self._keys

    def __getitem__(self, name: str) -> Entry[T]:
        """The entry of a name or alias (any spelling, without argument)."""
        return self._entries[self._keys[norm_name(name)]]

    def names(self) -> tuple[str, ...]:
        """The canonical names, in registration order."""
        return tuple(self._entries)

    def allowed(self) -> str:
        """The allowed forms in words: ``"one of 'mean', 'quantile:Q', ..."``."""
        return "one of " + ", ".join(repr(e.form) for e in self)

    def error(self, value: object, detail: str = "") -> InputError:
        """The parameter message for a refused ``value``."""
        return param_error(self.param, self.caller, detail or self.allowed(), value)

    def parse(self, text: str | Choice[T]) -> Choice[T]:
        """Read ``'name'`` or ``'name:arg'`` under the spelling policy.

        Raises
        ------
        InputError
            The project's parameter message, with a did-you-mean for a near miss.
        """
        if isinstance(text, Choice):
            return text
        if not isinstance(text, str):
            raise self.error(text)
        head, colon, arg = text.partition(":")
        key = norm_name(head)
        if key not in self._keys:
            raise InputError(str(self.error(text)) + did_you_mean(key, self._spellings()), param=self.param)
        entry = self._entries[self._keys[key]]
        if entry.arg is None:
            if colon:
                raise self.error(text, f"{entry.name!r} without a ':' argument")
            return Choice(entry)
        if not colon or not arg.strip():
            if entry.arg.optional:
                return Choice(entry)
            raise self.error(text, f"{entry.form!r} with {entry.arg.expected}")
        value = entry.arg.read(arg)
        if value is None:
            raise self.error(text, f"{entry.form!r} with {entry.arg.expected}")
        return Choice(entry, value)

    def accepts(self, text: object) -> bool:
        """Whether :meth:`parse` accepts ``text``."""
        try:
            self.parse(text)  # type: ignore[arg-type]
        except InputError:
            return False
        return True

    def _spellings(self) -> list[str]:
        return [norm_name(s) for e in self for s in (e.name, *e.aliases)]

    # ---------------------------------------------------------------- docs
    def help_text(self) -> str:
        """The forms for a command-line ``--help`` line: ``mean, min, quantile:Q, ...``."""
        return ", ".join(e.form for e in self)

    def doc_table(self) -> str:
        """A Markdown table of every entry: form, aliases and summary.

        Examples
        --------
        >>> reg = Registry("format", param="formats", caller="export_table")
        >>> _ = reg.add(Entry("csv", "comma-separated text"))
        >>> print(reg.doc_table())
        | format | also accepted | what it does |
        |---|---|---|
        | `csv` |  | comma-separated text |
        """
        def cell(text: str) -> str:  # a '|' would end the table cell, even in code
            return text.replace("|", "\\|")

        lines = [f"| {self.vocabulary} | also accepted | what it does |", "|---|---|---|"]
        for e in self:
            also = ", ".join(f"`{cell(a)}`" for a in e.aliases)
            lines.append(f"| `{cell(e.form)}` | {also} | {cell(e.summary)} |")
        return "\n".join(lines)
