"""The cheap check of each file of a many-file archive against the first, and its time values.

Each file is opened with the netCDF4 library (no xarray, no decoding) and must hold
the first file's variable with the same dims, the same sizes apart from time, the
same dtype, the same packing and masking attributes (``scale_factor``,
``add_offset``, ``_FillValue``, ``missing_value``, ``valid_min`` / ``valid_max`` /
``valid_range``, ``_Unsigned``) and ``units``, and the same latitude / longitude (or
y / x) coordinate values. Only its time values (and time bounds) are read. A file
that differs is a :class:`~envlink.errors.GridError` naming it and what differs; a
truncated (:func:`envlink.grids.filecheck.check_classic_size`) or unreadable one
too. Many files are checked by several processes.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from envlink.errors import GridError
from envlink.grids.filecheck import check_classic_size

__all__ = ["FileTimes", "check_files", "check_file", "COMPARED_ATTRS"]

#: Attributes of the variable that every file must share with the first.
COMPARED_ATTRS = ("scale_factor", "add_offset", "_FillValue", "missing_value", "valid_min", "valid_max",
                  "valid_range", "_Unsigned", "units")
#: From this many files on, the check runs in several processes.
_PARALLEL_FILES = 64


@dataclass(frozen=True)
class FileTimes:
    """One file's time values as stored, their units and calendar, its size and modification time."""

    values: np.ndarray
    units: str
    calendar: str | None
    bounds: np.ndarray | None
    size: int
    mtime_ns: int


def _text(value: Any) -> str:
    arr = np.asarray(value)
    return f"{arr.tolist()!r} ({arr.dtype})" if arr.dtype.kind in "iufb" else repr(str(value))


def _same_attr(a: Any, b: Any) -> bool:
    if a is None or b is None:
        return a is None and b is None
    x, y = np.asarray(a), np.asarray(b)
    if x.dtype.kind in "iufb" and y.dtype.kind in "iufb":
        return x.dtype == y.dtype and x.shape == y.shape and bool(np.array_equal(x, y, equal_nan=True))
    return str(a) == str(b)


def _differs(nc: Any, path: str, ref: dict[str, Any]) -> str | None:
    """What makes the open file ``nc`` differ from the reference, in words; None when nothing."""
    name = ref["variable"]
    if name not in nc.variables:
        return f"has no variable {name!r} (it holds {', '.join(nc.variables) or 'none'})"
    var = nc.variables[name]
    if tuple(var.dimensions) != tuple(ref["dims"]):
        return f"stores {name!r} over dims {tuple(var.dimensions)}, the first file over {tuple(ref['dims'])}"
    for d, n in zip(var.dimensions, var.shape, strict=True):
        if d in ref["shape"] and int(n) != ref["shape"][d]:
            return f"has {n} values along {d!r}, the first file {ref['shape'][d]}"
    if str(var.dtype) != ref["dtype"]:
        return f"stores {name!r} as {var.dtype}, the first file as {ref['dtype']}"
    have = set(var.ncattrs())
    for key in COMPARED_ATTRS:
        mine = var.getncattr(key) if key in have else None
        theirs = ref["attrs"].get(key)
        if not _same_attr(mine, theirs):
            return (f"has {key} {_text(mine) if mine is not None else '(none)'} where the first file has "
                    f"{_text(theirs) if theirs is not None else '(none)'}")
    for cname, expected in ref["coords"].items():
        if cname not in nc.variables:
            return f"has no coordinate variable {cname!r}"
        cvar = nc.variables[cname]
        cvar.set_auto_maskandscale(False)
        got = np.asarray(cvar[...])
        if got.shape != expected.shape:
            return f"has {got.size} {cname} values, the first file {expected.size} (another grid)"
        if not np.array_equal(got, expected):
            k = int(np.argmax(got.ravel() != expected.ravel()))
            return (f"has other {cname} values (another grid): value {k} is {got.ravel()[k].item()!r}, "
                    f"in the first file {expected.ravel()[k].item()!r}")
    return None


def check_file(path: str, ref: dict[str, Any]) -> FileTimes:
    """Check one file against the reference (see the module); its time values and stat."""
    import netCDF4

    try:
        st = os.stat(path)
    except OSError as exc:
        raise GridError(f"Cannot read the grid file {path!r}: {exc.strerror or exc}") from None
    check_classic_size(Path(path))
    try:
        nc = netCDF4.Dataset(path)
    except (OSError, RuntimeError, ValueError) as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise GridError(f"Cannot open the grid file {path!r}: {reason}. It may be truncated, corrupt or "
                        "not a netCDF file.") from None
    with nc:
        why = _differs(nc, path, ref)
        if why is not None:
            raise GridError(f"The file {path!r} {why}. Every file of an archive must hold the same grid, "
                            "variable and packing as the first; leave this one out or open it on its own.")
        tname = ref["time"]
        if tname not in nc.variables:
            raise GridError(f"The file {path!r} has no time variable {tname!r}, which the first file has.")
        tvar = nc.variables[tname]
        tvar.set_auto_maskandscale(False)
        attrs = set(tvar.ncattrs())
        bounds = None
        if ref["bounds"] is not None:
            if ref["bounds"] not in nc.variables:
                raise GridError(f"The file {path!r} has no time bounds {ref['bounds']!r}, which the first file has.")
            bvar = nc.variables[ref["bounds"]]
            bvar.set_auto_maskandscale(False)
            bounds = np.asarray(bvar[...], dtype=np.float64)
        return FileTimes(
            np.atleast_1d(np.asarray(tvar[...], dtype=np.float64)),
            str(tvar.getncattr("units")) if "units" in attrs else "",
            str(tvar.getncattr("calendar")) if "calendar" in attrs else None,
            bounds, int(st.st_size), int(st.st_mtime_ns))


def _check_batch(paths: Sequence[str], ref: dict[str, Any]) -> list[FileTimes]:
    return [check_file(p, ref) for p in paths]


def _workers(n_files: int) -> int:
    """Processes that check ``n_files`` files (this one included; 1: no reader process)."""
    env = os.environ.get("ENVLINK_READ_WORKERS")
    workers = int(env) if env and env.isdigit() else (os.cpu_count() or 1)
    return 1 if n_files < _PARALLEL_FILES else max(1, min(workers, 16))


def start_checkers(n_files: int) -> None:
    """Start the reader processes that :func:`check_files` will use, so that their start-up
    overlaps the decoding of the first file (nothing when the check runs in this process)."""
    if (workers := _workers(n_files)) >= 2:
        from envlink.core.processes import warm_up

        warm_up(workers - 1)


def check_files(paths: Sequence[Path], ref: dict[str, Any]) -> list[FileTimes]:
    """Check every file (the first included, for its time values); in several processes when many."""
    names = [str(p) for p in paths]
    workers = _workers(len(names))
    if workers < 2:
        return _check_batch(names, ref)
    from envlink.core.processes import run_shared

    size = -(-len(names) // (workers * 4))
    batches = [names[i : i + size] for i in range(0, len(names), size)]
    parts: dict[int, list[FileTimes]] = {}
    # this process checks too, while the readers start (kept for the archive's reads)
    run_shared(_check_batch, [(b, ref) for b in batches], workers - 1, parts.__setitem__)
    return [t for k in range(len(batches)) for t in parts[k]]
