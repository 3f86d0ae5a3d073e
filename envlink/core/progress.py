"""The progress-bar policy of every envlink stage and command.

One rule everywhere: ``show=None`` (the default) draws a bar only when standard error
is a terminal; when it is not (a log file, a pipe, a batch job), a long step writes
one summary line when it ends (``locate: 100,000 rows in 12.3 s``) instead of
hundreds of bar frames, and a short one (under :data:`LONG_STEP_S`) writes nothing.
``show=True`` forces a bar and ``show=False`` hides both. :func:`hide_progress` hides
every bar and line of the process (``--no-progress`` on every command). Bars and
lines go to standard error, never to standard output.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Iterable, Iterator
from typing import Any

__all__ = ["wants_progress", "progress_bar", "hide_progress", "LONG_STEP_S"]

#: A step that takes at least this long (seconds) gets its summary line in a log.
LONG_STEP_S = 2.0
_HIDDEN = False


def hide_progress(hidden: bool = True) -> None:
    """Hide (or show again) every progress bar and summary line of this process.

    Examples
    --------
    >>> hide_progress(); wants_progress(True)
    False
    >>> hide_progress(False); wants_progress(True)
    True
    """
    global _HIDDEN
    _HIDDEN = bool(hidden)


def _stderr_is_terminal() -> bool:
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):  # closed or replaced stderr
        return False


def wants_progress(show: bool | None) -> bool:
    """Whether to draw a bar: ``show`` when given, else whether stderr is a terminal.

    Examples
    --------
    >>> wants_progress(False), wants_progress(True)
    (False, True)
    """
    if _HIDDEN:
        return False
    if show is not None:
        return bool(show)
    return _stderr_is_terminal()


class _LogLine:
    """What a step gets instead of a bar when stderr is not a terminal: it counts, and
    writes one line when the step ends, if the step was long (:data:`LONG_STEP_S`)."""

    def __init__(self, total: int | None, desc: str, unit: str, iterable: Iterable[Any] | None = None) -> None:
        self.total, self.desc, self.unit, self.iterable = total, desc, unit, iterable
        self.n = 0
        self.postfix = ""
        self._t0 = time.perf_counter()
        self._closed = False

    def update(self, n: int | float = 1) -> None:
        self.n += int(n)

    def set_postfix_str(self, s: str = "", refresh: bool = True) -> None:
        self.postfix = s

    def set_description(self, desc: str | None = None, refresh: bool = True) -> None:
        self.desc = desc or ""

    def refresh(self) -> None:
        pass

    def __iter__(self) -> Iterator[Any]:
        for item in self.iterable or ():
            yield item
            self.n += 1
        self.close()

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        seconds = time.perf_counter() - self._t0
        if seconds >= LONG_STEP_S and not _HIDDEN:
            unit = self.unit if self.n == 1 else self.unit + "s"
            print(f"{self.desc}: {self.n:,} {unit} in {seconds:.1f} s", file=sys.stderr, flush=True)

    def __enter__(self) -> _LogLine:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def progress_bar(total: int | None, desc: str, unit: str, show: bool | None = None,
                 **kwargs: Any) -> Any:
    """A tqdm bar on stderr following the policy (disabled bars cost nothing).

    Without a terminal (and ``show=None``) it is a stand-in with the same methods
    (``update``, ``set_postfix_str``, ``close``, iteration, ``with``) that writes one
    summary line for a long step.

    Examples
    --------
    >>> with progress_bar(3, "demo", "step", show=False) as bar:
    ...     bar.update(3)
    """
    if show is None and not _HIDDEN and not _stderr_is_terminal():
        return _LogLine(total, desc, unit, kwargs.get("iterable"))
    from tqdm.auto import tqdm

    kwargs.setdefault("leave", False)
    return tqdm(total=total, desc=desc, unit=unit, file=sys.stderr,
                disable=not wants_progress(show), **kwargs)
