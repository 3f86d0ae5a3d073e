"""grid_info: time coverage and gaps, masked fraction on a sample, storage warnings, text and JSON."""

from __future__ import annotations

import json

import cftime
import numpy as np
import pytest

from envlink import grid_info
from envlink.grids import GridInfo
from grids._writers import simple_grid

LAT = np.array([0.5, 1.5, 2.5])
LON = np.array([10.5, 11.5, 12.5, 13.5])


def _monthly_times(months: list[int]) -> np.ndarray:
    stamps = [cftime.datetime(2000 + (m - 1) // 12, (m - 1) % 12 + 1, 15, calendar="standard") for m in months]
    return np.asarray(cftime.date2num(stamps, "days since 2000-01-01", calendar="standard"), dtype=float)


def test_gaps_listed_with_missing_steps(tmp_path):
    t = _monthly_times([1, 2, 5, 6, 7, 12])  # March-April and August-November missing
    p = simple_grid(tmp_path / "gaps.nc", np.zeros((6, 3, 4)), lat=LAT, lon=LON, time=t)
    info = grid_info(p)
    assert isinstance(info, GridInfo)
    assert info.time["step"] == "monthly" and info.time["steps"] == 6
    assert info.time["gaps"] == [
        {"from": "2000-03-01T00:00:00", "to": "2000-05-01T00:00:00", "missing_steps": 2},
        {"from": "2000-08-01T00:00:00", "to": "2000-12-01T00:00:00", "missing_steps": 4},
    ]
    assert info.time["start"] == "2000-01-01T00:00:00" and info.time["end"] == "2001-01-01T00:00:00"
    text = str(info)
    assert "2000-03-01T00:00:00 .. 2000-05-01T00:00:00 (2 step(s))" in text


def test_masked_fraction_on_a_sample_of_steps(tmp_path):
    n = 30
    data = np.zeros((n, 3, 4))
    data[::2, 0, :] = -999.0  # every other step: first row masked
    p = simple_grid(tmp_path / "mask.nc", data, lat=LAT, lon=LON, time=np.arange(float(n)),
                    attrs={"missing_value": -999.0})
    info = grid_info(p)
    idx = np.unique(np.linspace(0, n - 1, 12).round().astype(int))  # the documented sample
    by_hand = float(np.mean(data[idx] == -999.0))
    assert info.masked_fraction == pytest.approx(by_hand, rel=1e-12)
    assert info.masked_sample == f"on a sample of {idx.size} of {n} time steps"


def test_time_chunked_storage_warned(tmp_path):
    p = simple_grid(tmp_path / "tchunk.nc", np.zeros((40, 3, 4), dtype="float32"), lat=LAT, lon=LON,
                    time=np.arange(40.0), chunks=(1, 3, 4))
    info = grid_info(p)
    assert info.storage["chunks"] == {"time": 1, "lat": 3, "lon": 4}
    assert any("chunked by time (1 step(s) per chunk over 40 steps)" in w for w in info.warnings)


def test_missing_calendar_and_unpacked_valid_range_warned(tmp_path):
    raw = np.zeros((2, 3, 4), dtype="int16")
    attrs = {"units": "K", "scale_factor": 0.01, "add_offset": 273.15, "valid_range": np.array([260.0, 320.0])}
    p = simple_grid(tmp_path / "w.nc", raw, lat=LAT, lon=LON, time=np.array([0.0, 31.0]), attrs=attrs,
                    calendar=None)
    info = grid_info(p)  # the ValidRangeWarning is collected, not raised
    assert any("looks stated in unpacked units" in w for w in info.warnings)
    assert any("no calendar attribute" in w for w in info.warnings)


def test_text_fits_one_screen_and_json_round_trips(tmp_path):
    p = simple_grid(tmp_path / "g.nc", np.zeros((3, 3, 4)), lat=LAT[::-1], lon=LON + 180.0,
                    time=_monthly_times([1, 2, 3]))
    info = grid_info(p)
    text = str(info)
    for heading in ("Variables in the file:", "Axes found:", "Conventions applied:", "Time:", "Space:",
                    "Masked:", "Storage:"):
        assert heading in text
    assert "lat flipped to ascending" in text and "by standard_name='latitude'" in text
    assert len(text.splitlines()) <= 40
    d = json.loads(json.dumps(info.to_dict()))
    assert d["variable"] == "sst" and d["units"] == "degC" and d["calendar"] == "standard"
    assert d["axes"]["lon"]["found_by"] == "standard_name='longitude'"
    assert d["extent"] == {"lat_min": 0.5, "lat_max": 2.5, "lon_min": -169.5, "lon_max": -166.5}
    assert d["resolution"] == {"lat": 1.0, "lon": 1.0}


def test_info_of_an_open_grid():
    from envlink.testing import make_grid

    g = make_grid(lat=[0.5, 1.5], lon=[10.5, 11.5], periods=24, freq="MS", seed=1)
    info = grid_info(g)
    assert info.time["steps"] == 24 and info.time["gaps"] == []
    assert info.masked_fraction == 0.0


def test_daily_gaps_and_monthly_gaps_by_day_of_month(tmp_path):
    t = np.array([0.0, 1.0, 2.0, 6.0, 7.0])  # 4-6 January 2000 missing
    p = simple_grid(tmp_path / "d.nc", np.zeros((5, 3, 4)), lat=LAT, lon=LON, time=t)
    info = grid_info(p)
    assert info.time["step"] == "daily"
    assert info.time["gaps"] == [{"from": "2000-01-04T00:00:00", "to": "2000-01-07T00:00:00", "missing_steps": 3}]
    # Three monthly stamps on day 1 with a two-month hole: still monthly (one day of the month).
    stamps = [cftime.datetime(2001, m, 1, calendar="standard") for m in (1, 2, 5)]
    t2 = np.asarray(cftime.date2num(stamps, "days since 2000-01-01", calendar="standard"), dtype=float)
    p2 = simple_grid(tmp_path / "m.nc", np.zeros((3, 3, 4)), lat=LAT, lon=LON, time=t2)
    info2 = grid_info(p2)
    assert info2.time["step"] == "monthly" and info2.time["gaps"][0]["missing_steps"] == 2


def test_many_files_described_and_cftime_calendar_summarised(tmp_path):
    paths = []
    for k in range(20):
        stamps = [cftime.datetime(2000 + k, m, 16, calendar="360_day") for m in range(1, 13)]
        t = np.asarray(cftime.date2num(stamps, "days since 2000-01-01", calendar="360_day"), dtype=float)
        paths.append(simple_grid(tmp_path / f"y{k:02d}.nc", np.zeros((12, 3, 4), dtype="float32"),
                                 lat=LAT, lon=LON, time=t, calendar="360_day"))
    info = grid_info(str(tmp_path / "y*.nc"))
    assert info.time["steps"] == 240 and info.time["step"] == "monthly"
    assert info.time["end"] == "2020-01-01T00:00:00" and info.calendar == "360_day"
    assert info.storage["files"] == 20
    # read file by file (docs/archives.md): said, not warned about
    assert not any("split over 20 files" in w for w in info.warnings)
    assert info.archive["files"] == 20 and "Archive: 20 files (y00.nc .. y19.nc)" in str(info)


def test_all_masked_variable_is_warned(tmp_path):
    p = simple_grid(tmp_path / "m.nc", np.full((2, 2, 2), np.nan), lat=np.array([0.5, 1.5]),
                    lon=np.array([0.5, 1.5]), time=np.array([0.0, 1.0]))
    info = grid_info(p)
    assert info.masked_fraction == 1.0
    assert any("every cell looked at is masked or missing" in w for w in info.warnings)
