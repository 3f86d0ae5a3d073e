"""The ``envlink attach`` command: options, locating first, exit codes, summary."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from numpy.testing import assert_allclose

from envlink.cli import main


@pytest.fixture
def files(tmp_path, monkeypatch):
    monkeypatch.setenv("ENVLINK_CACHE", str(tmp_path / "cache"))
    vals = np.arange(24 * 3 * 2, dtype=float).reshape(24, 3, 2)
    ds = xr.Dataset(
        {"sst": (("time", "lat", "lon"), vals, {"units": "degC"})},
        coords={"time": pd.date_range("2000-01-01", periods=24, freq="MS"),
                "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5]},
    )
    ds.to_netcdf(tmp_path / "g.nc")
    daily = xr.Dataset(
        {"sst": (("time", "lat", "lon"), np.full((120, 1, 1), 30.0), {"units": "degC"})},
        coords={"time": pd.date_range("2000-01-01", periods=120, freq="D"), "lat": [0.5], "lon": [10.5]},
    )
    daily.to_netcdf(tmp_path / "daily.nc")
    pd.DataFrame({
        "id": [1, 2, 3], "site_lat": [1.2, 9.0, ""], "site_lon": [10.7, 10.7, ""],
        "period_start": ["2000-03-01", "2000-03-01", "2000-01-01"],
        "period_end": ["2000-03-31", "2000-03-31", "2000-01-31"],
        "locate_status": ["ok", "ok", "rejected"],
    }).to_csv(tmp_path / "located.csv", index=False)
    pd.DataFrame({"id": [1, 2], "la": ["1.2", "bad"], "lo": ["10.7", "11"], "when": ["2000-03", "2001"]}).to_csv(
        tmp_path / "raw.csv", index=False
    )
    return tmp_path


def test_attach_located_table(files, capsys):
    out = files / "out.csv"
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "sst", "-o", str(out)])
    assert rc == 0
    res = pd.read_csv(out, keep_default_na=False)
    # cell (1.5, 10.5) is row 1, col 0: value 2 + 6 × month index (March = 2) = 14
    assert_allclose(float(res["sst"][0]), 14.0, rtol=1e-12)
    assert res["sst_flags"].tolist() == ["", "outside_grid", "site_rejected"]
    err = capsys.readouterr().err
    assert "values         1" in err and "missing        2" in err and "outside_grid" in err
    assert list((files / "cache" / "cells").glob("*/*.cells"))  # the cells' series are in the store


def test_attach_locates_first(files):
    out = files / "out.parquet"
    rc = main(["attach", str(files / "raw.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
               "--lat", "la", "--lon", "lo", "--period", "when", "--stat", "max", "--window", "lag:1M",
               "-o", str(out), "--no-cache"])
    assert rc == 0
    res = pd.read_parquet(out)
    # Parquet is typed: a column of whole numbers written as text is integers; a column with
    # a cell that is no number keeps every cell exactly as written (envlink.tables.kinds)
    assert res["id"].tolist() == [1, 2] and pd.api.types.is_integer_dtype(res["id"])
    assert res["la"].tolist() == ["1.2", "bad"] and res["when"].tolist() == ["2000-03", "2001"]
    assert_allclose(res["sst"][0], 2.0 + 6.0, rtol=1e-12)  # February 2000 at cell (1.5, 10.5)
    assert res["sst_flags"][1] == "site_rejected"
    assert not (files / "cache").exists()


def test_attach_dhw_with_mmm_value(files):
    out = files / "dhw.csv"
    pd.DataFrame({"site_lat": [0.5], "site_lon": [10.5], "period_start": ["2000-04-01"],
                  "period_end": ["2000-04-29"]}).to_csv(files / "one.csv", index=False)
    rc = main(["attach", str(files / "one.csv"), "--grid", str(files / "daily.nc"), "--name", "dhw",
               "--stat", "dhw-max", "--mmm", "28.0", "-o", str(out)])
    assert rc == 0
    # HotSpot 2 °C every day: the 84-day sum / 7 = 24 °C-weeks (Liu et al. 2014 rule)
    assert_allclose(pd.read_csv(out)["dhw"][0], 24.0, rtol=1e-12)


def test_attach_dhw_beside_other_covariates_takes_mmm(files, capsys):
    # --mmm applies to the covariates whose statistic reads it (dhw-max), not to max beside it;
    # each value equals its own single-covariate call (same data, Liu et al. 2014 rule)
    pd.DataFrame({"site_lat": [0.5], "site_lon": [10.5], "period_start": ["2000-04-01"],
                  "period_end": ["2000-04-29"]}).to_csv(files / "one.csv", index=False)
    both, dhw, mx = (files / f"{n}.csv" for n in ("both", "dhw", "mx"))
    base = ["attach", str(files / "one.csv"), "--grid", str(files / "daily.nc"), "--no-cache"]
    assert main([*base, "--covariate", "dhw=dhw-max", "--covariate", "mx=max", "--mmm", "28.0",
                 "-o", str(both)]) == 0
    assert main([*base, "--name", "dhw", "--stat", "dhw-max", "--mmm", "28.0", "-o", str(dhw)]) == 0
    assert main([*base, "--name", "mx", "--stat", "max", "-o", str(mx)]) == 0
    got = pd.read_csv(both)
    assert_allclose(got["dhw"][0], 24.0, rtol=1e-12)
    assert got["dhw"][0] == pd.read_csv(dhw)["dhw"][0] and got["mx"][0] == pd.read_csv(mx)["mx"][0]
    # given with no statistic that reads it, --mmm is still refused
    assert main([*base, "--covariate", "mx=max", "--covariate", "mn=min", "--mmm", "28.0",
                 "-o", str(files / "no.csv")]) == 2
    assert "dhw-max" in capsys.readouterr().err


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--stat", "avg"], "The option --stat must be"),
        (["--spatial", "nearest-valid:abc"], "'nearest-valid:Dkm' with D a positive distance in km"),
        (["--mmm", "nowhere.nc", "--stat", "dhw-max"], "--mmm 'nowhere.nc' is neither a number"),
    ],
)
def test_attach_bad_options_exit_2(files, capsys, extra, message):
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v",
               "-o", str(files / "o.csv"), *extra])
    assert rc == 2
    assert message in capsys.readouterr().err


def test_attach_needs_located_columns_or_locate_options(files, capsys):
    rc = main(["attach", str(files / "raw.csv"), "--grid", str(files / "g.nc"), "--name", "v", "-o", str(files / "o.csv")])
    assert rc == 2
    assert "lacks the located columns site_lat, site_lon, period_start, period_end" in capsys.readouterr().err


def test_attach_refuses_to_overwrite(files, capsys):
    (files / "o.csv").write_text("x\n")
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v", "-o", str(files / "o.csv")])
    assert rc == 2 and "pass --force" in capsys.readouterr().err
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v",
               "-o", str(files / "o.csv"), "--force"])
    assert rc == 0


def test_attach_help_lists_forms(capsys):
    assert main(["attach", "--help"]) == 0
    text = capsys.readouterr().out
    for word in ("dhw-max", "nearest-valid:Dkm", "around-mid", "--time-weights", "--min-coverage", "--no-cache"):
        assert word in text


def test_attach_dhw_with_mmm_climatology_file(files):
    clim = xr.Dataset({"mmm": (("lat", "lon"), [[29.0]], {"units": "degC"})},
                      coords={"lat": [0.5], "lon": [10.5]})
    clim.to_netcdf(files / "mmm.nc")
    pd.DataFrame({"site_lat": [0.5], "site_lon": [10.5], "period_start": ["2000-04-01"],
                  "period_end": ["2000-04-29"]}).to_csv(files / "one.csv", index=False)
    out = files / "dhw2.csv"
    rc = main(["attach", str(files / "one.csv"), "--grid", str(files / "daily.nc"), "--name", "dhw",
               "--stat", "dhw-max", "--mmm", str(files / "mmm.nc"), "-o", str(out), "--no-cache"])
    assert rc == 0
    # HotSpot 1 °C (exactly the threshold) every day: 84 × 1 / 7 = 12 °C-weeks
    assert_allclose(pd.read_csv(out)["dhw"][0], 12.0, rtol=1e-12)


def test_attach_parquet_keeps_stored_types(files):
    pd.DataFrame({
        "id": np.array([1, 2], dtype=np.int64), "lat": [1.2, 9.0], "note": ["a", "b"],
        "site_lat": [1.2, 9.0], "site_lon": [10.7, 10.7],
        "period_start": ["2000-03-01"] * 2, "period_end": ["2000-03-31"] * 2,
    }).to_parquet(files / "o8.parquet")
    out = files / "a8.parquet"
    rc = main(["attach", str(files / "o8.parquet"), "--grid", str(files / "g.nc"), "--name", "sst",
               "-o", str(out), "--no-cache"])
    assert rc == 0
    res = pd.read_parquet(out)
    assert res["id"].dtype == np.int64
    assert res["lat"].dtype == np.float64 and res["site_lat"].dtype == np.float64
    assert res["id"].tolist() == [1, 2] and res["note"].tolist() == ["a", "b"]
    # cell (1.5, 10.5), March 2000: 2 + 6 × 2 = 14 (as in test_attach_located_table)
    assert_allclose(res["sst"][0], 14.0, rtol=1e-12)
    # a table whose located numbers were stored as text (an earlier run's a8.parquet) is read too
    res.drop(columns=[c for c in res.columns if c.startswith("sst")]).astype(
        {"site_lat": "string", "site_lon": "string"}).to_parquet(files / "text8.parquet")
    rc = main(["attach", str(files / "text8.parquet"), "--grid", str(files / "g.nc"), "--name", "sst",
               "-o", str(files / "b8.parquet"), "--no-cache"])
    assert rc == 0
    again = pd.read_parquet(files / "b8.parquet")
    assert again["site_lat"].dtype == np.float64 and again["id"].dtype == np.int64
    assert_allclose(again["sst"][0], 14.0, rtol=1e-12)


def test_attach_csv_reads_located_numbers_keeps_user_text(files):
    (files / "semi.csv").write_text(
        "id;site_lat;site_lon;site_precision_km;period_start;period_end;depth\n"
        "007;1,2;10,7;1,5;2000-03-01;2000-03-31;3,5\n"
        "8;;;;2000-03-01;2000-03-31;\n"
    )
    out = files / "semi.parquet"
    rc = main(["attach", str(files / "semi.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
               "-o", str(out), "--no-cache"])
    assert rc == 0
    res = pd.read_parquet(out)
    assert res["site_lat"].dtype == np.float64 and res["site_precision_km"].dtype == np.float64
    assert_allclose(res["site_lat"], [1.2, np.nan], rtol=0, atol=1e-12, equal_nan=True)  # decimal comma read
    assert res["id"].tolist() == ["007", "8"] and res["depth"].tolist() == ["3,5", ""]  # as written
    assert_allclose(res["sst"][0], 14.0, rtol=1e-12)
    assert res["sst_flags"][1] == "site_rejected"


def test_attach_unreadable_site_number_names_row_and_column(files, capsys):
    (files / "bad.csv").write_text("site_lat,site_lon,period_start,period_end\n"
                                   "1.2,10.7,2000-03-01,2000-03-31\n1.2,ten,2000-03-01,2000-03-31\n")
    rc = main(["attach", str(files / "bad.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
               "-o", str(files / "o.csv"), "--no-cache"])
    assert rc == 2
    err = capsys.readouterr().err
    assert "bad.csv" in err and "'site_lon' must hold numbers, but row 2 'ten' is not a number" in err
    assert not (files / "o.csv").exists()


@pytest.mark.parametrize(
    "target, message",
    [
        ("folder", "it is a folder"),
        ("o.txt", "unknown extension '.txt'"),
        ("blocker/o.csv", "cannot create a file in"),
    ],
)
def test_attach_checks_output_before_any_work(files, capsys, target, message):
    (files / "folder").mkdir()
    (files / "blocker").write_text("a regular file, so nothing can be written below it (even as root)\n")
    # the grid does not exist: the output is checked first, so its error is the one reported
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "missing.nc"), "--name", "sst",
               "-o", str(files / target)])
    assert rc == 2
    err = capsys.readouterr().err
    assert message in err and "missing.nc" not in err
    assert not (files / "cache").exists()


def test_attach_unwritable_cache_warns_and_writes_output(files, monkeypatch, capsys):
    from envlink.errors import CacheWarning

    (files / "blocker").write_text("a regular file\n")
    monkeypatch.setenv("ENVLINK_CACHE", str(files / "blocker" / "cache"))
    out = files / "out.csv"
    # the command line prints envlink's warnings as one plain line on stderr
    with warnings.catch_warnings():
        warnings.simplefilter("always", CacheWarning)
        rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
                   "-o", str(out)])
    assert rc == 0
    err = capsys.readouterr().err
    assert re.search(r"envlink attach: warning: The cache at '.*blocker.cache' could not be written .*not cached", err)
    assert "Traceback" not in err
    assert_allclose(float(pd.read_csv(out)["sst"][0]), 14.0, rtol=1e-12)
    assert "unexpected error" not in capsys.readouterr().err


def test_attach_grid_that_cannot_be_opened_exits_2_like_grid(files, capsys):
    (files / "notnc.nc").write_text("not a netcdf file\n")
    assert main(["grid", str(files / "notnc.nc")]) == 2
    grid_err = capsys.readouterr().err
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "notnc.nc"), "--name", "sst",
               "-o", str(files / "o.csv")])
    assert rc == 2
    attach_err = capsys.readouterr().err
    assert attach_err.startswith("envlink attach: error: ")
    assert attach_err.removeprefix("envlink attach: error: ") == grid_err.removeprefix("envlink grid: error: ")
    assert "notnc.nc" in attach_err
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "daily.nc"), "--name", "dhw", "--stat", "dhw-max",
               "--mmm", str(files / "notnc.nc"), "-o", str(files / "o.csv")])
    assert rc == 2 and "notnc.nc" in capsys.readouterr().err


def test_clash_and_range_messages_name_the_options(files, capsys):
    # messages say what to write (common practice): --name with --covariate, and a lag range A > B
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v",
               "--covariate", "x=mean", "-o", str(files / "o.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and "or --name (with --stat and --window), not both (--name was given too)" in err
    from envlink.errors import InputError
    from envlink.extract.family import read_steps

    with pytest.raises(InputError, match=r"'A\.\.B' with A <= B"):
        read_steps("3..0", "lags", low=0)


def test_locate_options_on_a_located_table_are_said_to_be_unused(files, capsys):
    # a located table is not located again: options that would read it are named as unused
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v",
               "--dayfirst", "--lat", "x", "--lon", "y", "-o", str(files / "o.csv")])
    err = capsys.readouterr().err
    assert rc == 0 and "note: TABLE has the located columns already" in err
    assert "--lat, --lon, --dayfirst were not used" in err
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "g.nc"), "--name", "v",
               "-o", str(files / "o2.csv")])
    assert rc == 0 and "not used" not in capsys.readouterr().err


def test_attach_grid_with_empty_time_axis_exits_2_naming_it(files, capsys):
    # Contract (exit codes in `envlink attach --help`): a grid whose time axis has length 0 is bad input,
    # exit 2 with the file named, as `envlink grid` says; never an IndexError.
    ds = xr.Dataset({"sst": (("time", "lat", "lon"), np.zeros((0, 3, 2)), {"units": "degC"})},
                    coords={"time": ("time", np.zeros(0), {"units": "days since 2000-01-01"}),
                            "lat": [0.5, 1.5, 2.5], "lon": [10.5, 11.5]})
    ds.to_netcdf(files / "emptytime.nc", unlimited_dims=["time"])
    rc = main(["attach", str(files / "located.csv"), "--grid", str(files / "emptytime.nc"), "--name", "sst",
               "-o", str(files / "o.csv")])
    assert rc == 2
    err = capsys.readouterr().err
    assert "emptytime.nc" in err and "has no steps" in err and "unexpected error" not in err
    assert not (files / "o.csv").exists()


def test_attach_locating_without_a_date_option_warns(files, capsys):
    # Checks against common practice: an option left out that leaves every row without a
    # value is said on stderr (docs/extract.md: rows without a period are flagged no_period).
    from envlink.errors import TableWarning

    out = files / "o.csv"
    with warnings.catch_warnings():
        warnings.simplefilter("always", TableWarning)
        rc = main(["attach", str(files / "raw.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
                   "--lat", "la", "--lon", "lo", "-o", str(out)])
    assert rc == 0
    err = capsys.readouterr().err
    assert "envlink attach: warning:" in err
    assert "--period COL, or --start COL --end COL" in err
    assert len(pd.read_csv(out)) == 2
    rc = main(["attach", str(files / "raw.csv"), "--grid", str(files / "g.nc"), "--name", "sst",
               "--lat", "la", "--lon", "lo", "--period", "when", "-o", str(out), "--force"])
    assert rc == 0
    assert "--period COL" not in capsys.readouterr().err
