"""The ``envlink grid`` command: one screen of text, JSON, and exit 2 with a message on bad input."""

from __future__ import annotations

import json

import numpy as np

from envlink.cli import main
from grids._writers import simple_grid

LAT = np.array([0.5, 1.5])
LON = np.array([0.5, 1.5])


def _file(tmp_path, name="g.nc", **kw):
    return simple_grid(tmp_path / name, np.zeros((2, 2, 2)), lat=LAT, lon=LON, time=np.array([0.0, 1.0]), **kw)


def test_text_output(tmp_path, capsys):
    p = _file(tmp_path)
    assert main(["grid", str(p)]) == 0
    out = capsys.readouterr().out
    assert "Axes found:" in out and "Time: calendar standard; 2 daily step(s)" in out


def test_json_output(tmp_path, capsys):
    p = _file(tmp_path)
    assert main(["grid", str(p), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["time"]["steps"] == 2 and d["units"] == "degC"


def test_options_passed(tmp_path, capsys):
    p = _file(tmp_path, calendar=None)
    assert main(["grid", str(p), "--calendar", "360_day", "--units", "K", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["calendar"] == "360_day"
    assert "units declared as 'K' (file says 'degC')" in d["conventions"]


def test_bad_variable_exits_2(tmp_path, capsys):
    p = _file(tmp_path)
    assert main(["grid", str(p), "--var", "sts"]) == 2
    err = capsys.readouterr().err
    assert "Did you mean 'sst'?" in err and "Traceback" not in err


def test_bad_file_exits_2_naming_it(tmp_path, capsys):
    bad = tmp_path / "broken.nc"
    bad.write_bytes(b"CDF\x01garbage")
    assert main(["grid", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "broken.nc" in err and "Traceback" not in err
    assert main(["grid", str(tmp_path / "absent.nc")]) == 2
    assert "absent.nc' does not exist" in capsys.readouterr().err


def test_static_and_time_conflict(tmp_path, capsys):
    p = _file(tmp_path)
    assert main(["grid", str(p), "--static", "--time", "time"]) == 2
    assert "either --time NAME or --static" in capsys.readouterr().err


def test_bad_calendar_names_the_option(tmp_path, capsys):
    p = _file(tmp_path)
    assert main(["grid", str(p), "--calendar", "julien"]) == 2
    err = capsys.readouterr().err
    assert "'julien'" in err and "is not a CF calendar" in err and "with --calendar noleap (say)" in err
    assert "calendar='noleap'" not in err  # the library's Python spelling is not shown here


def test_help_has_examples_and_exit_codes(capsys):
    assert main(["grid", "--help"]) == 0
    out = capsys.readouterr().out
    assert "examples:" in out and "Exit codes: 0 described, 2 a file" in out
    assert max(len(line) for line in out.splitlines()) <= 100  # wrapped for a terminal


def test_empty_time_axis_exits_2_naming_the_file(tmp_path, capsys):
    # Contract (exit codes in `envlink grid --help`): unreadable input exits 2 naming the
    # file, like any other unreadable grid; a time axis of length 0 holds no data.
    p = simple_grid(tmp_path / "emptytime.nc", np.zeros((0, 2, 2)), lat=LAT, lon=LON, time=np.zeros(0))
    assert main(["grid", str(p)]) == 2
    err = capsys.readouterr().err
    assert "emptytime.nc" in err and "has no steps" in err
    assert "unexpected error" not in err and "Traceback" not in err
