"""Reading a project file: the validated :class:`Project` record and :func:`load_project`.

:mod:`envlink.project` re-exports both.
"""

from __future__ import annotations

import hashlib
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from envlink.errors import InputError
from envlink.project.schema import resolve_path, validate
from envlink.tables.encoding import detect_encoding

__all__ = ["Project", "load_project"]


@dataclass(frozen=True)
class Project:
    """A validated project file. Paths are absolute (resolved against the file's folder).

    Attributes
    ----------
    source : pathlib.Path or None
        The file read (None for a project given as text).
    text, sha256 : str
        The file's text and the SHA-256 of its bytes (recorded in provenance).
    data : dict
        The parsed, validated TOML.
    title, out, cache_dir, studies, gazetteer
        Resolved settings (``cache_dir`` None means the user's cache folder,
        :func:`envlink.extract.store.cache_root`).
    """

    source: Path | None
    text: str
    sha256: str
    data: dict[str, Any]
    root: Path
    title: str
    out: Path
    cache_dir: Path | None
    studies: Path
    gazetteer: Path | None

    def section(self, name: str) -> dict[str, Any]:
        """The section ``name`` (an empty dict when absent)."""
        value = self.data.get(name, {})
        return dict(value) if isinstance(value, dict) else value

    @property
    def covariates(self) -> list[dict[str, Any]]:
        """The ``[[covariates]]`` tables, in file order."""
        return [dict(c) for c in self.data.get("covariates", [])]


def load_project(path: str | os.PathLike[str]) -> Project:
    """Read and validate a TOML project file.

    Parameters
    ----------
    path : path-like
        The project file. Relative paths inside it are relative to its folder.

    Returns
    -------
    Project

    Raises
    ------
    InputError
        Unreadable file, TOML syntax error (with its line), an unknown section or key,
        a bad value, or a missing required key; the message names the key, its line
        and what is allowed.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "p.toml"
    >>> _ = p.write_text('[studies]\\npath = "t.csv"\\n[model]\\nmethod = "REMLX"\\n')
    >>> load_project(p)
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: ...p.toml, line 4: the key 'model.method' must be one of 'REML', 'ML', 'DL', 'PM', 'HE', 'SJ'; got 'REMLX'.
    """
    p = Path(path)
    if p.is_dir():
        found = sorted(q.name for q in p.glob("*.toml"))[:5]
        raise InputError(
            f"Cannot read project file {str(p)!r}: it is a folder; give the project's .toml file"
            + (f" (the folder holds {', '.join(found)})." if found else ".")
        )
    if not p.is_file():
        raise InputError(f"Cannot read project file {str(p)!r}: no such file.")
    raw = p.read_bytes()
    encoding, skip = detect_encoding(raw)  # a byte-order mark or UTF-16 from an editor is read
    try:
        text = raw[skip:].decode("utf-8" if encoding in ("8bit", "binary") else encoding)
        data = tomllib.loads(text)
    except UnicodeDecodeError as exc:
        line = raw[:exc.start + skip].count(b"\n") + 1
        raise InputError(f"Cannot read project file {str(p)!r}: line {line} is not UTF-8 text "
                         f"({exc.reason}); save the file as UTF-8.") from exc
    except tomllib.TOMLDecodeError as exc:
        hint = ""
        if p.suffix.lower() in (".csv", ".tsv", ".txt", ".xlsx", ".parquet", ".nc"):
            hint = (" envlink run takes a TOML project file (see docs/project-file.md); "
                    "a table goes in its [studies] path.")
        raise InputError(f"{p}: not valid TOML: {exc}.{hint}") from exc
    validate(data, text, str(p))
    root = p.resolve().parent
    proj = data.get("project", {})
    loc = data.get("locate", {})

    return Project(
        source=p, text=text, sha256=hashlib.sha256(raw).hexdigest(), data=data, root=root,
        title=proj.get("title", "envlink report"), out=resolve_path(root, proj.get("out", "envlink-out")),
        cache_dir=resolve_path(root, proj["cache_dir"]) if "cache_dir" in proj else None,
        studies=resolve_path(root, data["studies"]["path"]),
        gazetteer=resolve_path(root, loc["gazetteer"]) if "gazetteer" in loc else None,
    )  # fmt: skip
