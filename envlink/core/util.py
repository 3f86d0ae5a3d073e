"""Small pure helpers shared by every stage: did-you-mean suggestions, atomic writes (one file or a group)."""

from __future__ import annotations

import contextlib
import contextvars
import difflib
import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

__all__ = ["did_you_mean", "atomic_path", "atomic_group", "probe_writable", "pause_for_tests", "pause_at_start_for_tests",
           "INVISIBLE_CHARS"]


def did_you_mean(name: str, choices: Iterable[str]) -> str:
    """Return ``" Did you mean 'x'?"`` for the closest choice, or ``""`` if none is close.

    Examples
    --------
    >>> did_you_mean("latitud", ["latitude", "longitude"])
    " Did you mean 'latitude'?"
    """
    choices = [str(c) for c in choices]
    lowered = {c.lower(): c for c in choices}
    match = difflib.get_close_matches(str(name).lower(), list(lowered), n=1, cutoff=0.6)
    return f" Did you mean {lowered[match[0]]!r}?" if match else ""


#: The renames waiting for the end of the current :func:`atomic_group` (None: no group).
_GROUP: contextvars.ContextVar[list[tuple[Path, Path]] | None] = contextvars.ContextVar(
    "envlink_atomic_group", default=None)


@contextlib.contextmanager
def _stop_signals_blocked() -> Iterator[None]:
    """Hold SIGINT, SIGTERM and SIGHUP while files are renamed; they arrive right after."""
    import signal

    held = {getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n)}
    if not hasattr(signal, "pthread_sigmask"):  # no signal masks on this platform
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


@contextlib.contextmanager
def atomic_group() -> Iterator[None]:
    """Every :func:`atomic_path` written inside lands together, at the end, or none does.

    The files are renamed into place one after another with the stop signals held
    (so a signal cannot leave some new outputs beside some previous ones); an
    exception or a signal before the end removes every temporary file and leaves the
    previous outputs as they were. Groups nest: an inner group joins the outer one.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_group():
    ...     for name in ("a.txt", "b.txt"):
    ...         with atomic_path(d / name) as tmp:
    ...             _ = tmp.write_text(name)
    ...     (d / "a.txt").exists()
    False
    >>> sorted(p.name for p in d.iterdir())
    ['a.txt', 'b.txt']
    """
    if _GROUP.get() is not None:
        yield
        return
    pending: list[tuple[Path, Path]] = []
    token = _GROUP.set(pending)
    try:
        yield
        with _stop_signals_blocked():
            for tmp, target in pending:
                os.replace(tmp, target)
    finally:
        _GROUP.reset(token)
        for tmp, _ in pending:
            if tmp.exists():
                tmp.unlink()


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` only on success.

    An interrupted write (exception, Ctrl-C, kill between writes) leaves any previous
    file at ``path`` untouched and removes the temporary file. Inside an
    :func:`atomic_group`, the rename waits for the end of the group.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_path(d / "out.txt") as tmp:
    ...     _ = tmp.write_text("hello")
    >>> (d / "out.txt").read_text()
    'hello'
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600 files; outputs get the usual mode
    handed = False
    try:
        yield tmp
        pause_for_tests(target)
        group = _GROUP.get()
        if group is None:
            with _stop_signals_blocked():
                os.replace(tmp, target)
        else:
            group.append((tmp, target))
            handed = True
    finally:
        if not handed and tmp.exists():
            tmp.unlink()


def pause_for_tests(target: Path) -> None:
    """Test hook: stop between writing a temporary file and renaming it into place.

    When ``ENVLINK_TEST_PAUSE_WRITE`` names a file and the target's name contains
    ``ENVLINK_TEST_PAUSE_MATCH`` (default: every target), that file is created (holding
    the target's path) and the write waits ``ENVLINK_TEST_PAUSE_SECONDS`` (default 60),
    so a test can send a signal while a temporary file exists beside the output
    (tests/test_signals.py, tests/badinput) or make two writers overlap
    (tests/extract/test_store.py). Output files and the cell-series store's segments
    both call it.
    """
    marker = os.environ.get("ENVLINK_TEST_PAUSE_WRITE")
    if not marker or os.environ.get("ENVLINK_TEST_PAUSE_MATCH", "") not in target.name:
        return
    _pause(Path(marker), str(target))


def pause_at_start_for_tests() -> None:
    """Test hook: stop before the command line imports its commands and parses its arguments.

    When ``ENVLINK_TEST_PAUSE_START`` names a file, that file is created and the command
    waits ``ENVLINK_TEST_PAUSE_SECONDS`` (default 60), so a test can send a stop signal
    at the moment the command modules (and pandas, pyarrow, ...) would be imported
    (tests/test_signals.py).

    Examples
    --------
    >>> pause_at_start_for_tests()  # the variable unset: returns at once
    """
    marker = os.environ.get("ENVLINK_TEST_PAUSE_START")
    if marker:
        _pause(Path(marker), "start")


def _pause(marker: Path, text: str) -> None:
    """Create ``marker`` holding ``text``, then wait ``ENVLINK_TEST_PAUSE_SECONDS``."""
    import time

    marker.write_text(text, encoding="utf-8")
    # Short slices: a signal whose C handler ran in another thread (the kernel may hand a
    # process-wide signal to any thread) still reaches its Python handler within 50 ms.
    end = time.monotonic() + float(os.environ.get("ENVLINK_TEST_PAUSE_SECONDS", "60"))
    while (left := end - time.monotonic()) > 0:
        time.sleep(min(left, 0.05))


def probe_writable(folder: str | os.PathLike[str]) -> None:
    """Create and remove a scratch file in ``folder``; the :class:`OSError` if that fails.

    Lets a command find a read-only or missing output location before any work.

    Examples
    --------
    >>> import tempfile
    >>> probe_writable(tempfile.mkdtemp())
    """
    fd, probe = tempfile.mkstemp(prefix=".envlink-write-check-", dir=folder)
    os.close(fd)
    os.unlink(probe)


#: Characters that are invisible in a spreadsheet cell but break parsing: zero-width
#: space / joiners, word joiner, BOM, soft hyphen, left-to-right / right-to-left marks.
#: Use as ``text.translate(INVISIBLE_CHARS)``.
INVISIBLE_CHARS: dict[int, None] = dict.fromkeys(
    map(ord, "\u200b\u200c\u200d\u2060\ufeff\u00ad\u200e\u200f")
)
