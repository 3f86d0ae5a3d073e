"""Time decoding in every CF calendar and the cells of each step, against cftime.

CF Conventions v1.11 §4.4 (time coordinates, ``<unit> since <date>``), §4.4.1
(calendars) and §7.1 (cell boundaries). cftime (``num2date``, the reference
implementation of CF calendars) is the reference for calendar arithmetic.
"""

from __future__ import annotations

import json

import cftime
import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference.cf_conventions import FEBRUARY_DAYS, YEAR_DAYS_2000

from envlink import InputError, open_grid
from envlink.grids.timeaxis import CF_CALENDARS, STANDARD_CALENDARS
from grids._writers import simple_grid

LAT = np.array([0.5, 1.5])
LON = np.array([10.5, 11.5])


def _data(n: int) -> np.ndarray:
    return np.arange(n * 4, dtype="float32").reshape(n, 2, 2)


def _iso(v) -> str:
    return str(v)[:19] if isinstance(v, np.datetime64) else v.isoformat()[:19]


def _days(a, b) -> float:
    if isinstance(a, np.datetime64):
        return float((b - a) / np.timedelta64(1, "D"))
    return (b - a).total_seconds() / 86400.0


@pytest.mark.parametrize("calendar", CF_CALENDARS)
def test_daily_values_decoded_like_cftime(tmp_path, calendar):
    # Days 0..69 since 1900-01-01 12:00 cross February 1900 (a leap year only in julian,
    # all_leap/366_day; 30 days in 360_day).
    t = np.arange(70, dtype="float64")
    units = "days since 1900-01-01 12:00:00"
    p = simple_grid(tmp_path / f"{calendar}.nc", _data(70), lat=LAT, lon=LON, time=t,
                    time_units=units, calendar=calendar)
    g = open_grid(p)
    expected = cftime.num2date(t, units, calendar=calendar, only_use_cftime_datetimes=True)
    got = g.time.values
    if calendar in STANDARD_CALENDARS:
        assert got.dtype == np.dtype("datetime64[ns]")
    else:
        assert isinstance(got[0], cftime.datetime) and got[0].calendar == expected[0].calendar
    assert [_iso(v) for v in got] == [d.isoformat()[:19] for d in expected]
    assert g.attrs["calendar"] == calendar
    # Daily stamps at 12:00 mean the calendar day: cells [day 00:00, next day 00:00).
    assert _iso(g.time_start.values[0]) == "1900-01-01T00:00:00"
    assert _iso(g.time_end.values[-1]) == (expected[-1].replace(hour=0) + np.timedelta64(1, "D").item()).isoformat()[:19]
    feb = [i for i, d in enumerate(expected) if d.month == 2]
    assert len(feb) == FEBRUARY_DAYS[calendar][1900]  # CF §4.4.1 month lengths


@pytest.mark.parametrize("calendar", CF_CALENDARS)
@pytest.mark.parametrize("day", [1, 15, "last"])
def test_monthly_stamps_at_start_mid_end_mean_the_same_months(tmp_path, calendar, day):
    stamps = []
    for m in range(1, 13):
        d = cftime.datetime(2000, m, 1, calendar=calendar)
        dd = d.daysinmonth if day == "last" else day
        stamps.append(cftime.datetime(2000, m, dd, 12 if day == 15 else 0, calendar=calendar))
    units = "days since 2000-01-01"
    t = np.asarray(cftime.date2num(stamps, units, calendar=calendar), dtype="float64")
    p = simple_grid(tmp_path / "m.nc", _data(12), lat=LAT, lon=LON, time=t,
                    time_units=units, calendar=calendar)
    g = open_grid(p)
    starts = [_iso(v) for v in g.time_start.values]
    assert starts == [f"2000-{m:02d}-01T00:00:00" for m in range(1, 13)]
    assert _iso(g.time_end.values[-1]) == "2001-01-01T00:00:00"
    lengths = [_days(a, b) for a, b in zip(g.time_start.values, g.time_end.values, strict=True)]
    assert sum(lengths) == YEAR_DAYS_2000[calendar]
    assert lengths[1] == FEBRUARY_DAYS[calendar][2000]
    assert "time cells inferred: monthly step, each stamp taken as its calendar month" in json.loads(
        g.attrs["envlink_conventions"])


def test_daily_stamps_at_00_and_12_give_the_same_cells(tmp_path):
    cells = []
    for hour in (0.0, 0.5):
        t = np.arange(5, dtype="float64") + hour
        p = simple_grid(tmp_path / f"d{hour}.nc", _data(5), lat=LAT, lon=LON, time=t)
        g = open_grid(p)
        cells.append((g.time_start.values.copy(), g.time_end.values.copy()))
    np.testing.assert_array_equal(cells[0][0], cells[1][0])
    np.testing.assert_array_equal(cells[0][1], cells[1][1])
    assert str(cells[0][0][0])[:10] == "2000-01-01" and str(cells[0][1][-1])[:10] == "2000-01-06"


def test_time_bounds_are_used(tmp_path):
    # CF §7.1: 8-day composites whose bounds say so, stamped at the cell middle.
    b = np.array([[0.0, 8.0], [8.0, 16.0], [16.0, 24.0]])
    t = b.mean(axis=1)
    extra = {"time_bnds": (("time", "nv"), b, {})}
    p = simple_grid(tmp_path / "b.nc", _data(3), lat=LAT, lon=LON, time=t,
                    time_attrs={"bounds": "time_bnds"}, extra=extra, calendar="noleap")
    g = open_grid(p)
    ref = cftime.num2date(b, "days since 2000-01-01", calendar="noleap")
    assert [v.isoformat() for v in g.time_start.values] == [d.isoformat() for d in ref[:, 0]]
    assert [v.isoformat() for v in g.time_end.values] == [d.isoformat() for d in ref[:, 1]]
    assert "time cells from bounds variable 'time_bnds'" in json.loads(g.attrs["envlink_conventions"])


def test_months_since_read_as_calendar_months(tmp_path):
    t = np.arange(14, dtype="float64")
    p = simple_grid(tmp_path / "ms.nc", _data(14), lat=LAT, lon=LON, time=t,
                    time_units="months since 1999-11-01", calendar="noleap")
    g = open_grid(p)
    assert [v.isoformat()[:10] for v in g.time.values[:3]] == ["1999-11-01", "1999-12-01", "2000-01-01"]
    assert g.time.values[-1].isoformat()[:10] == "2000-12-01"


def test_months_since_in_360_day_decoded_by_cftime(tmp_path):
    t = np.array([0.0, 1.0, 2.0])
    p = simple_grid(tmp_path / "ms360.nc", _data(3), lat=LAT, lon=LON, time=t,
                    time_units="months since 2000-01-01", calendar="360_day")
    g = open_grid(p)
    ref = cftime.num2date(t, "months since 2000-01-01", calendar="360_day")
    assert [v.isoformat() for v in g.time.values] == [d.isoformat() for d in ref]


def test_years_since(tmp_path):
    t = np.array([0.0, 1.0, 2.0])
    p = simple_grid(tmp_path / "ys.nc", _data(3), lat=LAT, lon=LON, time=t,
                    time_units="years since 1990-07-01", calendar="standard")
    g = open_grid(p)
    assert [str(v)[:10] for v in g.time.values] == ["1990-07-01", "1991-07-01", "1992-07-01"]
    assert str(g.time_start.values[0])[:10] == "1990-01-01"  # yearly cells are calendar years


def test_fractional_months_rejected(tmp_path):
    p = simple_grid(tmp_path / "mf.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.5, 1.5]),
                    time_units="months since 2000-01-01", calendar="standard")
    with pytest.raises(InputError, match="fractional values.*Rewrite the axis in days"):
        open_grid(p)


def test_missing_calendar_defaults_to_standard_and_is_noted(tmp_path):
    p = simple_grid(tmp_path / "nocal.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.0, 31.0]),
                    calendar=None)
    g = open_grid(p)
    assert g.attrs["calendar"] == "standard"
    assert "no calendar attribute: CF default 'standard' assumed" in json.loads(g.attrs["envlink_conventions"])


def test_calendar_option_overrides(tmp_path):
    t = np.array([58.0, 59.0])  # day 59 since 2000-01-01 is 2000-02-29 (standard) or 2000-03-01 (noleap)
    p = simple_grid(tmp_path / "cal.nc", _data(2), lat=LAT, lon=LON, time=t, calendar=None)
    g = open_grid(p, calendar="noleap")
    assert g.time.values[1].isoformat()[:10] == "2000-03-01"
    assert_allclose(_days(g.time_start.values[0], g.time_end.values[1]), 2.0, rtol=0, atol=0)


def test_bad_calendar_and_bad_units(tmp_path):
    p = simple_grid(tmp_path / "bad.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.0, 1.0]),
                    calendar="martian")
    with pytest.raises(InputError, match="'martian' of time is not a CF calendar.*calendar="):
        open_grid(p)
    p2 = simple_grid(tmp_path / "bad2.nc", _data(2), lat=LAT, lon=LON, time=np.array([0.0, 1.0]),
                     time_units="days")
    with pytest.raises(InputError, match="expected '<unit> since <date>'"):
        open_grid(p2)


def test_duplicate_stamps_in_one_month_rejected(tmp_path):
    from envlink import GridError

    t = np.array([0.0, 10.0, 40.0, 70.0])  # Jan 1, Jan 11, Feb 10, Mar 11: two in January
    p = simple_grid(tmp_path / "dup.nc", _data(4), lat=LAT, lon=LON, time=t)
    with pytest.raises(GridError, match="overlap or are not in order"):
        open_grid(p)


def test_daily_stamps_a_hair_before_midnight(tmp_path):
    # Floating-point time values 1e-7 days (8.64 ms) short of whole days still mean those days.
    t = np.arange(5, dtype="float64") - 1e-7
    p = simple_grid(tmp_path / "hair.nc", _data(5), lat=LAT, lon=LON, time=t)
    g = open_grid(p)
    assert [str(v)[:10] for v in g.time_start.values] == [f"2000-01-0{d}" for d in range(1, 6)]


def test_climatological_time_axis_cells_from_stamps(tmp_path):
    # CF §7.4: a monthly climatology over 1991-2020 has climatology bounds spanning those
    # years; the steps are still the calendar months of the stamps.
    stamps = [cftime.datetime(2000, m, 15, calendar="standard") for m in range(1, 13)]
    t = np.asarray(cftime.date2num(stamps, "days since 2000-01-01", calendar="standard"), dtype=float)
    lo = [cftime.datetime(1991, m, 1, calendar="standard") for m in range(1, 13)]
    hi = [cftime.datetime(2020, m % 12 + 1, 1, calendar="standard") if m < 12 else
          cftime.datetime(2021, 1, 1, calendar="standard") for m in range(1, 13)]
    b = np.column_stack([cftime.date2num(lo, "days since 2000-01-01"), cftime.date2num(hi, "days since 2000-01-01")])
    p = simple_grid(tmp_path / "clim.nc", _data(12), lat=LAT, lon=LON, time=t,
                    time_attrs={"climatology": "climatology_bounds"},
                    extra={"climatology_bounds": (("time", "nv"), b, {})})
    g = open_grid(p)
    assert str(g.time_start.values[1])[:10] == "2000-02-01" and str(g.time_end.values[1])[:10] == "2000-03-01"
    assert any(c.startswith("climatological time axis") for c in json.loads(g.attrs["envlink_conventions"]))
