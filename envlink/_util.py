"""Small pure helpers shared by every stage: did-you-mean suggestions, atomic writes."""

from __future__ import annotations

import contextlib
import difflib
import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

__all__ = ["did_you_mean", "atomic_path", "probe_writable", "INVISIBLE_CHARS"]


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


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` only on success.

    An interrupted write (exception, Ctrl-C, kill between writes) leaves any previous
    file at ``path`` untouched and removes the temporary file.

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
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()


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
