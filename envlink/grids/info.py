"""What a grid holds and covers: variables, axes, conventions, time, space, masking, storage.

:func:`grid_info` returns a :class:`GridInfo`, which prints as one screen of text for a
person (``envlink grid FILE``) and turns into JSON with :meth:`GridInfo.to_dict`.
"""

from __future__ import annotations

import json
import os
import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from envlink.grids.archive import archive_summary
from envlink.grids.conventions import GridWarning
from envlink.grids.decode import _to_cftime
from envlink.grids.identity import json_safe
from envlink.grids.open import _is_tiff, open_grid, open_raw, resolve_paths
from envlink.grids.timeaxis import step_kind

__all__ = ["GridInfo", "grid_info"]

#: At most this many time steps are read to measure the masked fraction.
MASK_SAMPLE_STEPS = 12
_MAX_GAPS_LISTED = 20


@dataclass
class GridInfo:
    """A description of a grid; ``str()`` gives the one-screen text, ``to_dict()`` the JSON."""

    source: str
    variable: str
    layout: str
    variables: dict[str, dict[str, Any]]
    axes: dict[str, dict[str, str]]
    conventions: list[str]
    units: str
    calendar: str | None
    time: dict[str, Any] | None
    extent: dict[str, float]
    resolution: dict[str, float]
    is_global: bool
    masked_fraction: float
    masked_sample: str
    storage: dict[str, Any]
    warnings: list[str] = field(default_factory=list)
    identity: dict[str, Any] = field(default_factory=dict)
    archive: dict[str, Any] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary of every field."""
        return json_safe(asdict(self))

    def __str__(self) -> str:
        lines = [f"Grid: {self.source}", f"Variable: {self.variable!r} ({self.layout} grid), units {self.units}"]
        if self.variables:
            lines.append("Variables in the file:")
            for name, v in self.variables.items():
                mark = "*" if name == self.variable else " "
                extra = f"  [{v['units']}]" if v.get("units") else ""
                lines.append(f"  {mark} {name} ({', '.join(v['dims'])}) {v['dtype']}{extra}")
        lines.append("Axes found:")
        for axis, a in self.axes.items():
            lines.append(f"  {axis:<5} {a['name']!r} by {a['found_by']}")
        lines.append("Conventions applied:")
        lines.extend(f"  - {c}" for c in self.conventions or ["none"])
        if self.time is not None:
            t = self.time
            lines.append(f"Time: calendar {self.calendar}; {t['steps']} {t['step']} step(s) "
                         f"covering {t['start']} .. {t['end']} (end exclusive)")
            if t["gaps"]:
                shown = t["gaps"][:_MAX_GAPS_LISTED]
                lines.append(f"  gaps ({t['n_gaps']}):")
                lines.extend(f"    {g['from']} .. {g['to']} ({g['missing_steps']} step(s))" for g in shown)
                if t["n_gaps"] > len(shown):
                    lines.append(f"    ... and {t['n_gaps'] - len(shown)} more")
            else:
                lines.append("  gaps: none")
        else:
            lines.append("Time: none (static grid)")
        e, r = self.extent, self.resolution
        names = [k[:-4] for k in e if k.endswith("_min")]
        space = "; ".join(
            f"{n} {e[n + '_min']:.10g}..{e[n + '_max']:.10g}" + (f" (step {r[n]:.10g})" if n in r else "")
            for n in names
        )
        lines.append(f"Space: {space}{'; covers the whole circle of longitude' if self.is_global else ''}")
        lines.append(f"Masked: {100.0 * self.masked_fraction:.1f} % of cells ({self.masked_sample})")
        chunks = self.storage.get("chunks")
        chunk_text = (
            ", ".join(f"{k}={v}" for k, v in chunks.items()) if isinstance(chunks, dict) else (chunks or "unknown")
        )
        lines.append(f"Storage: chunks {chunk_text}" + (f"; {self.storage['files']} files" if "files" in self.storage else ""))
        if self.archive:
            a = self.archive
            lines.append(f"Archive: {a['files']} files ({a['first']} .. {a['last']}) in {a['folder']}; "
                         f"{a['n_gaps']} gap(s) between files; read file by file, only the needed cells, "
                         "in worker processes (docs/archives.md)")
        if self.warnings:
            lines.append("Warnings:")
            lines.extend(f"  ! {w}" for w in self.warnings)
        return "\n".join(lines)


def _iso(v: Any) -> str:
    if isinstance(v, np.datetime64):
        return str(np.datetime_as_string(v, unit="s"))
    return v.isoformat() if hasattr(v, "isoformat") else str(v)


def _missing_steps(kind: str, a: Any, b: Any, step_days: float) -> int:
    if kind == "monthly":
        return (b.year - a.year) * 12 + (b.month - a.month)
    if kind == "yearly":
        return b.year - a.year
    return int(round((b - a).total_seconds() / 86400.0 / step_days))


def _time_summary(da: xr.DataArray) -> dict[str, Any]:
    cal = da.attrs.get("calendar", "standard")
    stamps = _to_cftime(da["time"].values, cal)
    starts = _to_cftime(da["time_start"].values, cal)
    ends = _to_cftime(da["time_end"].values, cal)
    kind, med = step_kind(stamps)
    if kind == "regular":
        step = f"regular {med:g}-day"
    elif kind == "single":
        step = "single"
        med = (ends[0] - starts[0]).total_seconds() / 86400.0
    else:
        step = kind
    gaps = []
    for i in range(1, len(starts)):
        if starts[i] > ends[i - 1]:
            gaps.append({
                "from": _iso(ends[i - 1]),
                "to": _iso(starts[i]),
                "missing_steps": _missing_steps(kind, ends[i - 1], starts[i], med),
            })
    return {
        "start": _iso(da["time_start"].values[0]),
        "end": _iso(da["time_end"].values[-1]),
        "steps": int(da.sizes["time"]),
        "step": step,
        "step_days": float(med),
        "n_gaps": len(gaps),
        "gaps": gaps,
    }


def _masked(da: xr.DataArray) -> tuple[float, str]:
    if "time" not in da.dims or da.sizes["time"] <= MASK_SAMPLE_STEPS:
        sub = da
        text = "all time steps" if "time" in da.dims else "whole grid"
    else:
        idx = np.unique(np.linspace(0, da.sizes["time"] - 1, MASK_SAMPLE_STEPS).round().astype(int))
        sub = da.isel(time=idx)
        text = f"on a sample of {idx.size} of {da.sizes['time']} time steps"
    frac = sub.isnull().mean()
    return float(frac.compute() if hasattr(frac, "compute") else frac), text


def _file_variables(source: Any) -> dict[str, dict[str, Any]]:
    if isinstance(source, (xr.DataArray, xr.Dataset)):
        ds = source.to_dataset(name=source.name or "data") if isinstance(source, xr.DataArray) else source
    elif isinstance(source, str) and "://" in source:
        from envlink.grids.remote import is_url, open_remote_raw

        if is_url(source):
            raw, _, _ = open_remote_raw(source)
            with raw:
                return _variables(raw)
        first = resolve_paths(source)[0]
    else:
        first = resolve_paths(source)[0]
        if _is_tiff(first):
            return {}
        with open_raw(first, chunks=None) as raw:  # metadata only; the file is closed after
            return _variables(raw)
    return _variables(ds)


def _variables(ds: xr.Dataset) -> dict[str, dict[str, Any]]:
    out = {}
    for name, v in ds.variables.items():
        out[str(name)] = {
            "dims": [str(d) for d in v.dims],
            "shape": [int(n) for n in v.shape],
            "dtype": str(v.dtype),
            "units": str(v.attrs.get("units", "")),
        }
    return out


def _extent(da: xr.DataArray) -> tuple[dict[str, float], dict[str, float]]:
    extent: dict[str, float] = {}
    res: dict[str, float] = {}
    names = ("lat", "lon") if da.attrs.get("envlink_layout") != "projected" else ("y", "x")
    for n in names:
        vals = np.asarray(da[n].values, dtype=np.float64)
        extent[f"{n}_min"] = float(np.nanmin(vals))
        extent[f"{n}_max"] = float(np.nanmax(vals))
        if vals.ndim == 1 and vals.size > 1:
            res[n] = float(np.median(np.diff(vals)))
    return extent, res


def grid_info(
    source_or_dataarray: str | os.PathLike[str] | Sequence[str | os.PathLike[str]] | xr.Dataset | xr.DataArray,
    variable: str | None = None,
    **open_options: Any,
) -> GridInfo:
    """Describe a grid: what it holds, how it was decoded, what it covers, what may go wrong.

    Parameters
    ----------
    source_or_dataarray : path(s), xarray.Dataset or xarray.DataArray
        Anything :func:`envlink.open_grid` accepts, or a grid it already returned.
    variable : str, optional
        The data variable.
    **open_options
        Passed to :func:`envlink.open_grid` (``lat=``, ``lon=``, ``time=``, ``units=``, ...).

    Returns
    -------
    GridInfo
        Warnings that opening raised (:class:`~envlink.grids.GridWarning`) are
        collected in ``warnings`` rather than raised.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> info = grid_info(make_grid(lat=[0.5, 1.5], lon=[10.5, 11.5], periods=3, seed=0))
    >>> info.time["step"], info.time["steps"], info.masked_fraction
    ('monthly', 3, 0.0)
    """
    src = source_or_dataarray
    notes: list[str] = []
    if isinstance(src, xr.DataArray) and "envlink_conventions" in src.attrs:
        da = src
    else:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", GridWarning)
            da = open_grid(src, variable, **open_options)
        notes.extend(str(w.message) for w in caught if issubclass(w.category, GridWarning))
    conventions = json.loads(da.attrs.get("envlink_conventions", "[]"))
    storage = json.loads(da.attrs.get("envlink_storage", "{}"))
    identity = json.loads(da.attrs.get("envlink_identity", "{}"))
    if len(identity.get("files", [])) > 1:
        storage["files"] = len(identity["files"])
    time = _time_summary(da) if "time" in da.dims else None
    chunks = storage.get("chunks")
    archive = archive_summary(da)
    if time is not None and isinstance(chunks, dict) and "time" in chunks:
        tc, nt = chunks["time"], time["steps"]
        if archive is not None:  # an archive is read file by file: what counts is one file's steps
            nt = int(storage.get("shape", {}).get("time", 1))
        if nt > 1 and tc * 20 <= nt:
            notes.append(
                f"storage is chunked by time ({tc} step(s) per chunk over {nt} steps): a point "
                "series reads every chunk, so extraction will be slow; rechunk along time first "
                "(e.g. xarray .chunk({'time': -1, ...}).to_zarr(...))."
            )
    if storage.get("files", 0) >= 20 and archive is None:
        notes.append(f"the grid is split over {storage['files']} files: a point series opens every "
                     "file; combine them into one time-chunked store for repeated extraction.")
    if any(c.startswith("no calendar attribute") for c in conventions):
        notes.append("the time axis has no calendar attribute; CF's default 'standard' was assumed "
                     "(declare another with calendar='NAME').")
    fraction, sample_text = _masked(da)
    if fraction >= 1.0:
        notes.append(f"every cell looked at is masked or missing ({sample_text}): no value can be "
                     "attached from this variable; check the variable (variable=) and the file's _FillValue/valid_range.")
    extent, res = _extent(da)
    files = identity.get("files", [])
    source_text = (
        ", ".join(str(f["path"]) if f.get("remote") else str(Path(f["path"])) for f in files[:3]) + (f" (+{len(files) - 3} more)" if len(files) > 3 else "")
        if files else "in-memory grid"
    )
    return GridInfo(
        source=source_text,
        variable=str(da.attrs.get("envlink_variable", da.name)),
        layout=str(da.attrs.get("envlink_layout", "regular")),
        variables=_file_variables(src) if not isinstance(src, xr.DataArray) else {},
        axes=json.loads(da.attrs.get("envlink_axes", "{}")),
        conventions=conventions,
        units=str(da.attrs.get("units", "")),
        calendar=da.attrs.get("calendar"),
        time=time,
        extent=extent,
        resolution=res,
        is_global=bool(da.attrs.get("envlink_global", False)),
        masked_fraction=fraction,
        masked_sample=sample_text,
        storage=storage,
        warnings=notes,
        identity=identity,
        archive=archive,
    )

