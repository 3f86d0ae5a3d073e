"""The one output-path check: no output replaces an input, nor an existing file without ``force``.

Every command, every output option (``-o``, ``--json``, ``--influence``, ``--out``)
and the project run's exports check their paths here, before any work:

- a path that is a folder, or has an extension the writer does not write, is refused;
- a path that is one of the run's inputs (the same file, however it is spelt: a
  relative path, a symbolic or hard link) is refused **even with** ``force``: writing
  there would destroy the input;
- two outputs of one run that are the same file are refused;
- an existing file is refused unless ``force`` is given;
- the folder must accept a new file (probed, so a read-only or missing location is
  found before any work).

Messages name the Python parameter (``force=True``); the command line shows its
option (``--force``, see :mod:`envlink.commands.options`).
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

from envlink.core.util import probe_writable
from envlink.errors import InputError

__all__ = ["check_output_path", "check_output_paths", "same_file", "Inputs", "PathText"]

#: The inputs of a run: paths, or a mapping path -> how to name it in a message
#: (``"TABLE"``, ``"--gazetteer"``, ``"studies.path, line 2"``).
PathText = str | os.PathLike[str]
Inputs = Mapping[PathText, str] | Iterable[PathText]


def same_file(a: str | os.PathLike[str], b: str | os.PathLike[str]) -> bool:
    """Whether two paths name one file (resolved paths, or one inode for links).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> same_file(d / "a.csv", d / "sub" / ".." / "a.csv"), same_file(d / "a.csv", d / "b.csv")
    (True, False)
    """
    pa, pb = Path(a), Path(b)
    try:
        if pa.resolve() == pb.resolve():
            return True
        return pa.exists() and pb.exists() and os.path.samefile(pa, pb)
    except OSError:  # an unreadable path is not the same file as anything
        return False


def _labelled(inputs: Inputs) -> list[tuple[Path, str]]:
    if isinstance(inputs, Mapping):
        return [(Path(p), str(label)) for p, label in inputs.items() if p is not None]
    return [(Path(p), "an input") for p in inputs if p is not None]


def _input_clash(path: Path, inputs: list[tuple[Path, str]]) -> None:
    for source, label in inputs:
        if same_file(path, source):
            what = "" if label == "an input" else f" ({label})"
            raise InputError(
                f"The output {str(path)!r} is also an input of this run{what}; writing it would "
                "destroy the input, so it is refused even with force=True. Choose another output path."
            )


def _check_shape(p: Path, suffixes: Sequence[str] | None) -> None:
    allowed = tuple(s.lower() for s in suffixes) if suffixes else ()
    if p.is_dir():
        example = f"result{allowed[0]}" if allowed else "result"
        raise InputError(
            f"Cannot write {str(p)!r}: it is a folder; give a file name inside it, "
            f"e.g. {str(p / example)!r}."
        )
    if allowed and p.suffix.lower() not in allowed:
        expected = allowed[0] if len(allowed) == 1 else ", ".join(allowed[:-1]) + " or " + allowed[-1]
        what = f"unknown extension {p.suffix!r}" if p.suffix else "no extension"
        raise InputError(f"Cannot write {str(p)!r}: {what}; expected {expected}.")


def _probe(p: Path) -> None:
    folder = p.parent
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    try:  # a read-only or missing location is found before any work is done
        probe_writable(folder)
    except OSError as exc:
        reason = exc.strerror or str(exc)
        raise InputError(
            f"Cannot write {str(p)!r}: cannot create a file in {str(folder)!r} ({reason})."
        ) from exc


def check_output_path(path: str | os.PathLike[str], *, force: bool = False,
                      suffixes: Sequence[str] | None = None, inputs: Inputs = ()) -> Path:
    """Check, before any work, that one output file may be written at ``path``.

    Parameters
    ----------
    path : path-like
        The output file.
    force : bool, default False
        Allow replacing an existing file (never an input).
    suffixes : sequence of str, optional
        The extensions the writer writes (any case); default: any.
    inputs : paths, or mapping of path to a label
        The run's inputs; an output that is one of them is refused even with ``force``.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    InputError
        A folder, an unknown extension, an input, an existing file without ``force``,
        or a folder where no file can be created.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "t.csv").write_text("a\\n1\\n")
    >>> check_output_path(d / "t.csv", force=True, inputs={d / "t.csv": "TABLE"})
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The output '...t.csv' is also an input of this run (TABLE); ...
    >>> check_output_path(d / "t.csv")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: '...t.csv' exists; pass force=True to overwrite it.
    >>> check_output_path(d / "fit.json", suffixes=(".json",)).name
    'fit.json'
    """
    return check_output_paths([path], force=force, suffixes=suffixes, inputs=inputs)[0]


def check_output_paths(paths: Iterable[str | os.PathLike[str]], *, force: bool = False,
                       suffixes: Sequence[str] | None = None, inputs: Inputs = ()) -> list[Path]:
    """Check, before any work, that every output of one run may be written (see :func:`check_output_path`).

    Besides each path's own checks, two outputs that are one file are refused, and all
    the existing outputs are named in one message.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> check_output_paths([d / "a.csv", d / "b" / ".." / "a.csv"])
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Two outputs of this run are one file: ...
    """
    out = [Path(p) for p in paths]
    sources = _labelled(inputs)
    for i, p in enumerate(out):
        _check_shape(p, suffixes)
        _input_clash(p, sources)
        for q in out[:i]:
            if same_file(p, q):
                raise InputError(
                    f"Two outputs of this run are one file: {str(q)!r} and {str(p)!r}; give each "
                    "output its own path."
                )
    existing = [p for p in out if p.exists()]
    if existing and not force:
        if len(out) == 1:
            raise InputError(f"{str(existing[0])!r} exists; pass force=True to overwrite it.")
        raise InputError(
            f"Output exists and would be overwritten: {', '.join(repr(str(p)) for p in existing)}; "
            "pass force=True to replace it."
        )
    probed: set[Path] = set()
    for p in out:
        if p.parent not in probed:
            _probe(p)
            probed.add(p.parent)
    return out
