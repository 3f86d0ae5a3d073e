"""Windows inside a grid's time span that fall in a gap between steps (a missing day in one
file, or a missing file of an archive): coverage 0 and ``no_data_in_window``, never
``outside_grid_time``.

Expected flags and coverage follow the definitions of docs/extract.md ("Coverage is always
the fraction of the window's days that have data"; ``outside_grid_time``: "the window lies
wholly outside the grid's time span"; ``no_data_in_window``: "the cell(s) have data, but
none in the window") and docs/archives.md (windows in a gap get less coverage).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from grids._writers import simple_grid
from numpy.testing import assert_allclose

from envlink import open_grid
from envlink.cli import main
from envlink.errors import GridWarning
from envlink.extract.attach import attach

from ._grids import table

LAT = np.array([0.5, 1.5])
LON = np.array([10.5, 11.5])
DAYS = [0, 1, 2, 4, 5]  # 2000-01-01 .. 2000-01-06 without 2000-01-04 (day 3)


def _values(day: int) -> np.ndarray:
    return np.full((1, 2, 2), 10.0 + day)


# rows: the gap day alone; a window across the gap; a window wholly after the grid
STARTS = ["2000-01-04", "2000-01-03", "2000-01-10"]
ENDS = ["2000-01-04", "2000-01-05", "2000-01-12"]


def _check(out: pd.DataFrame, no_data: str = "no_data_in_window") -> None:
    flags = out["v_flags"].astype(str).tolist()
    # the gap day: inside the span, no step -> coverage 0, no value, no_data_in_window
    # (nearest-valid: no cell within D km has data in the window)
    assert flags[0] == no_data
    assert np.isnan(out["v"][0]) and out["v_coverage"][0] == 0.0
    # 3 to 5 January: 2 of 3 days have data (days 2 and 4 hold 12 and 14)
    assert flags[1] == "partial_coverage"
    assert_allclose(out["v_coverage"][1], 2 / 3, rtol=1e-12)
    assert_allclose(out["v"][1], 13.0, rtol=1e-12)
    # wholly after the span: still outside_grid_time, coverage blank
    assert flags[2] == "outside_grid_time"
    assert np.isnan(out["v"][2]) and np.isnan(out["v_coverage"][2])


def test_single_file_with_a_missing_day(tmp_path):
    data = np.concatenate([_values(d) for d in DAYS])
    p = simple_grid(tmp_path / "gap.nc", data, lat=LAT, lon=LON, time=np.array(DAYS, dtype=float))
    g = open_grid(p)
    assert g.sizes["time"] == 5
    _check(attach(table([0.7] * 3, [10.7] * 3, STARTS, ENDS), g, name="v"))


@pytest.mark.parametrize("spatial", ["nearest", "nearest-valid:60km", "bilinear"])
def test_archive_with_a_missing_file(tmp_path, spatial):
    for d in DAYS:
        simple_grid(tmp_path / f"sst_{d:02d}.nc", _values(d), lat=LAT, lon=LON, time=np.array([float(d)]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GridWarning)  # the gap's warning, tested in tests/grids
        g = open_grid(str(tmp_path / "sst_*.nc"))
    out = attach(table([0.7] * 3, [10.7] * 3, STARTS, ENDS), g, name="v", spatial=spatial)
    _check(out, "no_valid_cell_within_60km" if spatial.startswith("nearest-valid") else "no_data_in_window")


def test_archive_gap_on_the_command_line(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    for d in DAYS:
        simple_grid(tmp_path / f"sst_{d:02d}.nc", _values(d), lat=LAT, lon=LON, time=np.array([float(d)]))
    table([0.7] * 3, [10.7] * 3, STARTS, ENDS).to_csv(tmp_path / "rows.csv", index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GridWarning)  # the gap's warning, tested in tests/grids
        rc = main(["attach", str(tmp_path / "rows.csv"), "--grid", str(tmp_path / "sst_*.nc"),
                   "--covariate", "v=mean", "-o", str(tmp_path / "out.csv")])
    assert rc == 0
    _check(pd.read_csv(tmp_path / "out.csv", keep_default_na=False, na_values=[""]))
