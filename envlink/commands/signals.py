"""Stop signals for every command: SIGINT, SIGTERM and SIGHUP end a run the same clean way.

Batch schedulers and container stops send SIGTERM, a closed terminal sends SIGHUP,
Ctrl-C sends SIGINT. While a command runs, each of them raises :class:`Stopped` (a
:class:`KeyboardInterrupt`) in the main thread, so the same clean-up runs for all
three: every output is written to a temporary file and renamed into place only when
complete (:func:`envlink.core.util.atomic_path`), so the temporary files are removed,
previous outputs stay as they were, and the command exits with 128 + the signal's
number after one line on stderr saying so.

A second signal during that clean-up is ignored, so it cannot cut the clean-up
short; a third one stops the process the plain way. A signal that was ignored when envlink started (``nohup`` ignores SIGHUP) stays
ignored. Worker processes started by envlink stop at once on these signals (they hold
no output of their own).
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator
from types import FrameType
from typing import Any

__all__ = ["Stopped", "STOP_SIGNALS", "stop_on_signals", "exit_code", "signal_name"]

#: The signals that stop a command cleanly (those the platform has).
STOP_SIGNALS: tuple[signal.Signals, ...] = tuple(
    getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name)
)


class Stopped(KeyboardInterrupt):
    """A stop signal arrived; ``signum`` is its number.

    Examples
    --------
    >>> exc = Stopped(15)
    >>> exc.signum, isinstance(exc, KeyboardInterrupt)
    (15, True)
    """

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = int(signum)


def signal_name(signum: int) -> str:
    """The signal's name, e.g. ``'SIGTERM'``.

    Examples
    --------
    >>> signal_name(2)
    'SIGINT'
    """
    try:
        return signal.Signals(signum).name
    except ValueError:
        return f"signal {signum}"


def exit_code(signum: int) -> int:
    """The exit code of a command stopped by a signal: 128 + its number (the shell's rule).

    Examples
    --------
    >>> exit_code(15), exit_code(1)
    (143, 129)
    """
    return 128 + int(signum)


@contextlib.contextmanager
def stop_on_signals(signals: tuple[signal.Signals, ...] = STOP_SIGNALS) -> Iterator[None]:
    """Within the block, each of ``signals`` raises :class:`Stopped` once; the old handlers come back after.

    Does nothing outside the main thread (Python delivers signals there only).

    Examples
    --------
    >>> import os, signal
    >>> try:
    ...     with stop_on_signals():
    ...         os.kill(os.getpid(), signal.SIGTERM)
    ... except Stopped as exc:
    ...     print(exc.signum == signal.SIGTERM)
    True
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    owner = os.getpid()
    stopping: list[int] = []

    def handle(signum: int, frame: FrameType | None) -> None:
        if os.getpid() != owner:  # a forked worker: no output of its own, stop at once
            signal.signal(signum, signal.SIG_DFL)
            os.kill(os.getpid(), signum)
            return
        stopping.append(signum)
        if len(stopping) == 2:  # already stopping: let the clean-up finish
            return
        if len(stopping) > 2:  # a third signal: the clean-up hangs, so stop the plain way
            signal.signal(signum, signal.SIG_DFL)
            os.kill(os.getpid(), signum)
            return
        raise Stopped(signum)

    previous: dict[signal.Signals, Any] = {}
    for sig in signals:
        before = signal.getsignal(sig)
        if before is signal.SIG_IGN:
            continue
        previous[sig] = before
        signal.signal(sig, handle)
    try:
        yield
    finally:
        for sig, before in previous.items():
            signal.signal(sig, before if before is not None else signal.SIG_DFL)
