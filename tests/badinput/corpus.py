"""The bad-input corpus: what a case is, the files it writes, and every case of every category.

Each case is made here, in code, with fixed seeds (no committed data files): the files
it writes into its own folder, the command it runs, and the outcome the contract
promises (docs/locate.md, docs/extract.md, docs/methods.md, docs/project-file.md and
``envlink --help``): the exit code (0 done, 1 the run failed, 2 bad usage or bad input,
128 + N stopped by signal N) and fragments of the error line naming the row, field,
file or key, or the output rows' status, flags and values. Fragments describe the
contract (a row number, a column, a file, a QA code), not the wording around them.

``python tests/badinput/summary.py`` counts the cases by category and outcome for the
README.
"""

from __future__ import annotations

import csv
import functools
import io
import tempfile
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

CATEGORIES = ("tables", "coordinates", "dates", "gazetteers", "grids", "fits", "project files",
              "output paths", "interrupts", "report escaping")


@dataclass(frozen=True)
class Case:
    """One input and the outcome the contract promises for it.

    Attributes
    ----------
    id : str
        Unique, stable name.
    category : str
        One of :data:`CATEGORIES`.
    argv : tuple of str
        The ``envlink`` command line, run in the case's folder (relative paths).
    files : tuple of (name, bytes)
        Files written into the folder before the run.
    rc : int
        Expected exit code (-1: 1 or 2, for a damaged file that may fail on opening or
        on reading).
    messages : tuple of str
        Regular expressions the error line (exit 1 or 2), else stderr, must match.
    table, output : str
        The input table and the output table whose rows are checked (every input row,
        in order, its columns unchanged; the output exists exactly when ``rc == 0``).
    rows : tuple of (column, values)
        Expected cells of the output, one per row: ``"text"`` exact, ``"~regex"``
        searched, ``"=number"`` compared with rtol 1e-9.
    unchanged : tuple of str
        Files that must keep their bytes (inputs, previous outputs).
    kind : str
        ``cli`` (in-process ``envlink.cli.main``), ``signal`` (a process stopped by a
        signal while a temporary file exists), ``rerun`` (stopped, then run again:
        byte-identical CSV), ``report`` (the HTML report with hostile strings).
    signal : int
        The signal of ``signal`` and ``rerun`` cases.
    pause : str
        Part of the file name whose atomic write pauses for the signal.
    links : tuple of (link, target)
        Links made before the run: symbolic, or hard when the link starts ``hard:``.
    outcome : str
        The outcome in words, for the summary table.
    """

    id: str
    category: str
    argv: tuple[str, ...] = ()
    files: tuple[tuple[str, bytes], ...] = ()
    rc: int = 0
    messages: tuple[str, ...] = ()
    table: str = ""
    output: str = ""
    rows: tuple[tuple[str, tuple[str, ...]], ...] = ()
    unchanged: tuple[str, ...] = ()
    kind: str = "cli"
    signal: int = 0
    pause: str = ""
    links: tuple[tuple[str, str], ...] = ()
    outcome: str = field(default="")

    def summary_outcome(self) -> str:
        """The outcome column of the summary table."""
        if self.outcome:
            return self.outcome
        if self.rc == -1:
            return "exit 1 or 2, file named"
        if self.rc == 0:
            return "exit 0, rows flagged/checked" if self.rows else "exit 0"
        return {1: "exit 1 (run failed)", 2: "exit 2 (bad input)"}.get(self.rc, f"exit {self.rc}")


def csv_bytes(header: Sequence[str], rows: Iterable[Sequence[object]], *, encoding: str = "utf-8",
              sep: str = ",") -> bytes:
    """A CSV file's bytes, quoted as a spreadsheet quotes it."""
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=sep, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        w.writerow(["" if v is None else v for v in r])
    return buf.getvalue().encode(encoding)


@functools.cache
def grid_bytes(kind: str = "monthly") -> bytes:
    """A small netCDF grid: monthly SST 2000-2001 on 3 x 2 cells (0.5-2.5 N, 10.5-11.5 E).

    ``kind``: ``monthly``; ``classic`` (the same as netCDF-3); ``nan`` (every value
    missing); ``kelvin`` (units K); ``two`` (two variables, so ``--var`` is needed);
    ``notime`` (no time axis).
    """
    import numpy as np
    import pandas as pd
    import xarray as xr

    values = np.arange(24 * 3 * 2, dtype=float).reshape(24, 3, 2)
    units = "K" if kind == "kelvin" else "degC"
    if kind == "nan":
        values[:] = np.nan
    if kind == "kelvin":
        values = values + 273.15
    coords = {"time": pd.date_range("2000-01-01", periods=24, freq="MS"),
              "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5]}
    data = {"sst": (("time", "lat", "lon"), values, {"units": units, "long_name": "sea <b>surface</b>"})}
    if kind == "two":
        data["air"] = (("time", "lat", "lon"), values, {"units": "degC"})
    if kind == "notime":
        ds = xr.Dataset({"sst": (("lat", "lon"), values[0], {"units": units})},
                        coords={"lat": coords["lat"], "lon": coords["lon"]})
    else:
        ds = xr.Dataset(data, coords=coords)
    with tempfile.TemporaryDirectory() as folder:  # a file as the netCDF library writes it
        path = Path(folder) / "g.nc"
        ds.to_netcdf(path, format="NETCDF3_64BIT" if kind == "classic" else "NETCDF4")
        return path.read_bytes()


def all_cases() -> list[Case]:
    """Every case of the corpus, in category order."""
    from badinput import cases_locate, cases_model, cases_runs

    makers: list[Callable[[], list[Case]]] = [
        cases_locate.tables, cases_locate.coordinates, cases_locate.dates, cases_locate.gazetteers,
        cases_model.grids, cases_model.fits, cases_model.projects, cases_runs.output_paths,
        cases_runs.interrupts, cases_runs.report_escaping,
    ]
    cases = [c for make in makers for c in make()]
    ids = [c.id for c in cases]
    dup = {i for i in ids if ids.count(i) > 1}
    assert not dup, f"duplicate case ids: {sorted(dup)}"
    bad = {c.category for c in cases} - set(CATEGORIES)
    assert not bad, f"unknown categories: {bad}"
    return cases
