"""Many-file archives: one grid from many netCDF files along time, opened in about a millisecond per file.

Daily products often ship one file per day (thousands of files, int16 packed, a time
axis of length 1). :func:`open_archive` reads the first file's metadata fully and
normalises it as a single file is (:func:`envlink.grids.decode.normalise_dataset`),
then checks every other file cheaply with the netCDF4 library
(:mod:`envlink.grids.archive_check`: the same variable, dims, dtype, packing
attributes and coordinates) and reads only its time values. The steps of all files
are put on one time axis and decoded together; faults are reported, never merged:

- two files holding the same time stamp (or the same time cell): :class:`GridError`
  naming both; files whose times overlap: the same;
- a file on another grid, with another variable, dtype or packing: :class:`GridError`
  naming the file and what differs; a file with no time step (a time axis of length
  0): the same; a truncated or unreadable file: the same (at
  opening when the cheap check sees it, else when its values are read);
- file names out of time order: the files are sorted by time, with a note;
- a gap in the time axis (a missing day): a :class:`GridWarning` and a note, and the
  gaps are listed by ``envlink grid``.

The values are read file by file, only the needed cells (:mod:`envlink.grids.archive_read`).
The identity covers every file's path, size and modification time.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from xarray.core import indexing

from envlink.errors import GridError, GridWarning, warn
from envlink.grids.archive_check import FileTimes, check_files, start_checkers
from envlink.grids.archive_read import ArchiveArray, ArchiveSpec
from envlink.grids.decode import DecodeOptions, ReadRecipe, decode_time_alone, normalise_dataset
from envlink.grids.identity import archive_identity, identity_json
from envlink.grids.units import step_days

__all__ = ["open_archive", "archive_summary", "ARCHIVE_ATTR"]

#: Attribute of an archive grid: JSON with the files, the time span, the gaps and how it is read.
ARCHIVE_ATTR = "envlink_archive"
_GAPS_LISTED = 5


def _reference(ds0: xr.Dataset, rec: ReadRecipe) -> dict[str, Any]:
    """What every other file must match: the first file's variable, dims, dtype, attributes, coordinates."""
    raw = ds0[rec.variable]
    layout = rec.layout
    names = [n for n in (layout.lat_name, layout.lon_name) if n] or [
        n for n in (rec.ydim, rec.xdim) if n in ds0.variables]
    tname = layout.axes["time"]["name"]
    tvar = ds0[tname]
    return {
        "variable": rec.variable,
        "dims": rec.dims,
        "shape": {str(d): int(n) for d, n in raw.sizes.items() if d != rec.tdim},
        "dtype": str(raw.dtype),
        "attrs": dict(rec.raw_attrs),
        "coords": {n: np.asarray(ds0[n].values) for n in names},
        "time": tname,
        "bounds": tvar.attrs.get("bounds") if tvar.attrs.get("bounds") in ds0.variables else None,
    }


def _common_units(files: list[FileTimes], paths: list[Path]) -> tuple[np.ndarray, np.ndarray | None, str,
                                                                     str | None]:
    """Every file's time values (and bounds) in the first file's units; the units and calendar."""
    import cftime

    units, cal = files[0].units, files[0].calendar
    values, bounds = [], []
    for f, p in zip(files, paths, strict=True):
        if f.values.size == 0:  # as a single file with no steps: a faulty file, named
            raise GridError(f"The file {str(p)!r} has no time steps (its time axis has length 0), so it "
                            "holds no data. Check the file (it may have been written before any step was "
                            "added), or leave it out of the archive's files.")
        if (f.calendar or "standard") != (cal or "standard"):
            raise GridError(f"The file {str(p)!r} has calendar {f.calendar!r} but {str(paths[0])!r} has {cal!r}; "
                            "files combined along time must share one calendar.")
        v, b = f.values, f.bounds
        if f.units != units:
            c = cal or "standard"
            v = np.asarray(cftime.date2num(cftime.num2date(v, f.units, c), units, c), dtype=np.float64)
            if b is not None:
                b = np.asarray(cftime.date2num(cftime.num2date(b, f.units, c), units, c), dtype=np.float64)
        values.append(v)
        bounds.append(b)
    if any((b is None) != (bounds[0] is None) for b in bounds):
        raise GridError("Some files have time bounds and others do not; files combined along time must agree.")
    bnd = np.concatenate([b for b in bounds if b is not None]) if bounds[0] is not None else None
    return np.concatenate(values), bnd, units, cal


def _order(files: list[FileTimes], values: list[np.ndarray], paths: list[Path], notes: list[str]) -> list[int]:
    """Files in time order (a note when names were not); overlaps and shared stamps are errors."""
    first = np.array([v.min() if v.size else np.inf for v in values])
    order = np.argsort(first, kind="stable").tolist()
    if order != sorted(order):
        k = next(i for i in range(1, len(order)) if order[i] < order[i - 1])
        notes.append(f"files sorted by time: their names are not in time order ({paths[order[k - 1]].name} "
                     f"comes before {paths[order[k]].name} in time)")
    for a, b in zip(order[:-1], order[1:], strict=True):
        if values[b].size and values[a].size and values[b].min() <= values[a].max():
            same = np.intersect1d(values[a], values[b])
            what = (f"both hold the time stamp {same[0]:g} ({files[a].units})" if same.size
                    else f"overlap in time ({files[a].units}: {values[a].min():g}..{values[a].max():g} and "
                         f"{values[b].min():g}..{values[b].max():g})")
            raise GridError(f"The files {str(paths[a])!r} and {str(paths[b])!r} {what}. Duplicate time steps "
                            "are not merged: remove one of the files, or pass the files that form one series.")
    return order


def _time_axis(files: list[FileTimes], paths: list[Path], ref: dict[str, Any], opts: DecodeOptions,
               notes: list[str]) -> tuple[xr.DataArray, str, list[int]]:
    """Decode all files' steps as one time axis (steps of the files in time order); the file order."""
    values, bounds, units, cal = _common_units(files, paths)
    sizes = [f.values.size for f in files]
    per_file = np.split(values, np.cumsum(sizes)[:-1])
    order = _order(files, per_file, paths, notes)
    offsets = np.concatenate([[0], np.cumsum(sizes)])
    steps = np.concatenate([np.arange(offsets[i], offsets[i + 1]) for i in order])
    tdim = "time"
    tattrs = {"units": units, **({"calendar": cal} if cal else {})}
    data: dict[str, Any] = {ref["time"]: xr.Variable(tdim, values[steps], tattrs)}
    if bounds is not None:
        tattrs["bounds"] = "time_bounds"
        data["time_bounds"] = xr.Variable((tdim, "nv"), bounds[steps], {"units": units})
        data[ref["time"]] = xr.Variable(tdim, values[steps], tattrs)
    try:
        index, calendar, tnotes = decode_time_alone(xr.Dataset(data), ref["time"], opts, "the files' time axes")
    except GridError as exc:
        pair = _same_cell(per_file, order, units, cal)
        named = f" ({str(paths[pair[0]])!r} and {str(paths[pair[1]])!r})" if pair else ""
        raise GridError(f"{exc} Two of the archive's files put steps in one time cell{named}; remove the "
                        "duplicate file.") from None
    notes.extend(tnotes)
    return index, calendar, order


def _same_cell(per_file: list[np.ndarray], order: list[int], units: str, cal: str | None) -> tuple[int, int] | None:
    """Two files next in time whose steps share a calendar day (else a month), if any."""
    import cftime

    days = [cftime.num2date(v, units, cal or "standard") if v.size else [] for v in per_file]
    for key in (lambda d: (d.year, d.month, d.day), lambda d: (d.year, d.month)):
        for a, b in zip(order[:-1], order[1:], strict=True):
            if {key(d) for d in days[a]} & {key(d) for d in days[b]}:
                return a, b
    return None


def _gaps(index: xr.DataArray, file_of: np.ndarray, paths: list[Path]) -> list[dict[str, str]]:
    starts, ends = index["time_start"].values, index["time_end"].values
    where = np.nonzero(starts[1:] > ends[:-1])[0]
    out = []
    for i in where:
        out.append({"from": str(ends[i])[:19], "to": str(starts[i + 1])[:19],
                    "after": paths[int(file_of[i])].name, "before": paths[int(file_of[i + 1])].name})
    return out


def _spec(rec: ReadRecipe, ref: dict[str, Any], paths: list[Path], stamps: list[tuple[int, int]],
          file_of: np.ndarray, local: np.ndarray, days: np.ndarray | None, storage: dict[str, Any],
          space: tuple[str, str]) -> ArchiveSpec:
    chunks = storage.get("chunks")
    yx = None
    if isinstance(chunks, dict) and space[0] in chunks and space[1] in chunks:
        yx = (int(chunks[space[0]]), int(chunks[space[1]]))  # the stored rows' and columns' chunks
    return ArchiveSpec(
        tuple(str(p) for p in paths), tuple(stamps), rec.variable, rec.dims, str(rec.tdim), rec.ydim, rec.xdim,
        dict(rec.picks), rec.iy, rec.ix, file_of, local, dict(rec.raw_attrs), np.dtype(ref["dtype"]),
        rec.dtype, rec.conv, rec.per_step, days, yx)


def open_archive(paths: Sequence[Path], ds0: xr.Dataset, variable: str | None, opts: DecodeOptions,
                 full_hash: bool = False) -> xr.DataArray:
    """Open many netCDF files as one grid along time (see the module); ``ds0``: the first file, raw."""
    paths = list(paths)
    start_checkers(len(paths))  # the checkers start while the first file is decoded
    recipe: list[ReadRecipe] = []
    template = normalise_dataset(ds0, variable, opts, label=str(paths[0]), recipe=recipe)
    rec = recipe[0]
    if rec.tdim is None:
        raise GridError("Several files can only be combined along a time axis; these are static grids.")
    ref = _reference(ds0, rec)
    ds0.close()
    files = check_files(paths, ref)
    notes = list(rec.notes_space)
    index, calendar, order = _time_axis(files, paths, ref, opts, notes)
    paths = [paths[i] for i in order]
    file_of = np.searchsorted(np.cumsum([files[i].values.size for i in order]), index.values, side="right")
    offsets = np.concatenate([[0], np.cumsum([files[i].values.size for i in order])])
    local = np.asarray(index.values) - offsets[file_of]
    gaps = _gaps(index, file_of, paths)
    notes.append(f"{len(paths)} files combined along time, sorted by time")
    if gaps:
        notes.append(f"{len(gaps)} gap(s) in time between files (listed by 'envlink grid')")
        g = gaps[0]
        warn(f"The archive of {len(paths)} files has {len(gaps)} gap(s) in time: the first from {g['from']} to "
             f"{g['to']}, between {g['after']} and {g['before']}. Rows whose windows span a gap get less "
             "coverage (flag partial_coverage); check that no file is missing.", GridWarning)
    notes.extend(rec.notes_units)
    days = step_days(index["time_start"].values, index["time_end"].values) if rec.per_step else None
    storage = json.loads(template.attrs["envlink_storage"])
    stamps = [(f.size, f.mtime_ns) for f in (files[i] for i in order)]
    spec = _spec(rec, ref, paths, stamps, file_of, local, days, storage, (str(template.dims[1]), str(template.dims[2])))
    data = xr.Variable(template.dims, indexing.LazilyIndexedArray(ArchiveArray(spec)))
    coords = {k: v for k, v in template.coords.items() if "time" not in v.dims}
    coords.update({k: ("time", index[k].values) for k in ("time", "time_start", "time_end")})
    out = xr.DataArray(data, coords=coords, name=template.name)
    attrs = dict(template.attrs)
    attrs.pop("_raw_attrs", None)
    storage.update(files=len(paths), read="file by file, only the needed cells, in worker processes")
    ident = archive_identity(paths, rec.variable, rec.raw_attrs, full_hash=full_hash,
                             stats=[(s[0], s[1]) for s in stamps])
    attrs.update(calendar=calendar, envlink_conventions=json.dumps(notes), envlink_storage=json.dumps(storage),
                 envlink_identity=identity_json(ident))
    attrs[ARCHIVE_ATTR] = json.dumps({
        "files": len(paths), "first": paths[0].name, "last": paths[-1].name, "steps": int(out.sizes["time"]),
        "n_gaps": len(gaps), "gaps": gaps[:_GAPS_LISTED], "folder": os.path.commonpath([str(p) for p in paths]),
    })
    out.attrs = attrs
    return out


def archive_summary(grid: xr.DataArray) -> dict[str, Any] | None:
    """The archive facts of a grid (files, first and last, steps, gaps), or None for one file."""
    text = grid.attrs.get(ARCHIVE_ATTR)
    try:
        return json.loads(text) if text else None
    except (TypeError, ValueError):
        return None
