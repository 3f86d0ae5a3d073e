"""The source files the stored cell series depend on: the import graphs of the reading modules.

The cell-series store (:mod:`envlink.extract.store`) keeps each cell's series as
read from a grid's files, keyed by the files' identity, not by their values; so the
code that turns files into series must enter the key too. The start modules
(:data:`STARTS`) are the grid reading (:mod:`envlink.grids.open`: packing, valid
ranges, units, the time axis), the cell reader (:mod:`envlink.extract.reader`) and
the store itself (:mod:`envlink.extract.series`, :mod:`envlink.extract.store`, and
through them its segment files). :func:`dependency_files` follows the import
statements (read with :mod:`ast`) of every envlink module the start modules import,
transitively, including imports inside functions (the lazy ones) and the packages
whose ``__init__`` runs on the way; nothing is imported to find them (so naming
``grids`` here imports no module of that stage). :func:`decoding_files` keeps of
those the files under :data:`DECODING` (the package ``__init__`` files on the way
reach every stage; a new statistic or window leaves the stored series as they are),
and :func:`source_hash` is the SHA-256 over them, which the store puts in every key,
so series stored by other code are not served after any of it changes.
"""

from __future__ import annotations

import ast
import hashlib
import re
from collections.abc import Iterable, Sequence
from pathlib import Path

__all__ = ["dependency_files", "decoding_files", "source_hash", "package_root", "STARTS", "DECODING"]

PACKAGE = "envlink"
#: The grid reading, the cell reader and the store: the code that gives the stored series.
STARTS = ("envlink.grids.open", "envlink.extract.reader", "envlink.extract.series", "envlink.extract.store")
#: The paths (relative to the package's folder) of the start modules' import graph that
#: the store's key covers: the grid stage, the shared core, and the extract stage's
#: reading and storing of cells.
DECODING = (
    "envlink/grids/", "envlink/core/", "envlink/errors.py", "envlink/geo.py", "envlink/extract/reader.py",
    "envlink/extract/series.py", "envlink/extract/store.py", "envlink/extract/storefiles.py",
    "envlink/extract/segments.py", "envlink/extract/codehash.py",
)


def package_root() -> Path:
    """The folder that holds the ``envlink`` package."""
    return Path(__file__).resolve().parents[2]


def _module_file(root: Path, module: str) -> Path | None:
    base = root.joinpath(*module.split("."))
    if (base / "__init__.py").is_file():
        return base / "__init__.py"
    path = base.with_suffix(".py")
    return path if path.is_file() else None


#: An import statement at any indentation (so the lazy ones inside functions too),
#: parenthesised names included; each match is then read with :mod:`ast`.
_IMPORT = re.compile(rb"^[ \t]*(?:from[ \t]+[\w.]+[ \t]+import[ \t]+(?:\([^)]*\)|[^\n]*)|import[ \t]+[^\n]*)",
                     re.MULTILINE)


def _imported(path: Path, module: str) -> set[str]:
    """Every envlink module (or module attribute) named by an import statement in ``path``.

    Import statements are found by their first words and parsed one by one with
    :mod:`ast` (parsing whole modules costs ten times more); a match that does not
    parse (prose in a docstring) is no import.
    """
    try:
        source = path.read_bytes()
    except OSError:
        return set()
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    names: set[str] = set()
    for match in _IMPORT.finditer(source):
        try:
            nodes = ast.parse(match.group(0).strip()).body
        except (SyntaxError, ValueError):
            continue
        for node in nodes:
            if isinstance(node, ast.Import):
                names.update(alias.name for alias in node.names)
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:  # relative: from the module's own package upwards
                    anchor = package.rsplit(".", node.level - 1)[0] if node.level > 1 else package
                    base = f"{anchor}.{base}" if base else anchor
                names.add(base)
                names.update(f"{base}.{alias.name}" for alias in node.names)
    return {n for n in names if n == PACKAGE or n.startswith(PACKAGE + ".")}


def dependency_files(start: str | Sequence[str] = STARTS, root: Path | None = None) -> list[Path]:
    """The source files of ``start`` and of every envlink module it imports, transitively.

    Parameters
    ----------
    start : str or sequence of str
        The module(s) to start from (default :data:`STARTS`).
    root : path, optional
        The folder holding the ``envlink`` package (default: this installation's).

    Returns
    -------
    list of Path
        Sorted by their path relative to ``root``.

    Examples
    --------
    >>> names = {p.relative_to(package_root()).as_posix() for p in dependency_files()}
    >>> {"envlink/extract/reader.py", "envlink/grids/decode.py", "envlink/geo.py"} <= names
    True
    """
    root = Path(root) if root is not None else package_root()
    seen: dict[str, Path] = {}
    todo = [start] if isinstance(start, str) else list(start)
    while todo:
        module = todo.pop()
        parts = module.split(".")
        for k in range(1, len(parts) + 1):  # the packages on the way run their __init__
            name = ".".join(parts[:k])
            if name in seen:
                continue
            path = _module_file(root, name)
            if path is None:  # an attribute of a module, not a module
                continue
            seen[name] = path
            todo.extend(_imported(path, name))
    return sorted(set(seen.values()), key=lambda p: p.relative_to(root).as_posix())


def decoding_files(root: Path | None = None) -> list[Path]:
    """The files of :func:`dependency_files` (from :data:`STARTS`) under :data:`DECODING`.

    Examples
    --------
    >>> names = {p.relative_to(package_root()).as_posix() for p in decoding_files()}
    >>> {"envlink/grids/decode.py", "envlink/extract/store.py", "envlink/extract/segments.py"} <= names
    True
    >>> "envlink/extract/statistics.py" in names
    False
    """
    root = Path(root) if root is not None else package_root()
    return [p for p in dependency_files(STARTS, root) if p.relative_to(root).as_posix().startswith(DECODING)]


def source_hash(files: Iterable[Path], root: Path | None = None) -> str:
    """SHA-256 hex over the files' names (relative to ``root``) and bytes, in the given order."""
    root = Path(root) if root is not None else package_root()
    h = hashlib.sha256()
    for f in files:
        h.update(f"{f.relative_to(root).as_posix()}\x00".encode())
        try:
            h.update(f.read_bytes())
        except OSError:
            h.update(b"<unreadable>")
        h.update(b"\x00")
    return h.hexdigest()
