"""The progress policy: bars only on a terminal, one summary line per long step in a log,
and ``--no-progress`` on every command."""

from __future__ import annotations

import subprocess
import sys

import pytest

from envlink import cli
from envlink.core import progress


def test_without_a_terminal_a_long_step_writes_one_line(monkeypatch, capsys) -> None:
    monkeypatch.setattr(progress, "LONG_STEP_S", 0.0)
    with progress.progress_bar(3000, "reading cells", "cell") as bar:  # stderr is captured: no terminal
        for _ in range(3):
            bar.update(1000)
        bar.set_postfix_str("ignored")
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("reading cells: 3,000 cells in ")
    total = sum(progress.progress_bar(4, "fits", "fit", iterable=range(4)))
    assert total == 6 and capsys.readouterr().err.startswith("fits: 4 fits in ")


def test_short_steps_and_hidden_bars_write_nothing(monkeypatch, capsys) -> None:
    with progress.progress_bar(10, "quick", "row") as bar:  # well under LONG_STEP_S
        bar.update(10)
    monkeypatch.setattr(progress, "LONG_STEP_S", 0.0)
    with progress.progress_bar(10, "hidden", "row", show=False) as bar:
        bar.update(10)
    progress.hide_progress()
    try:
        with progress.progress_bar(10, "hidden", "row") as bar:
            bar.update(10)
        assert not progress.wants_progress(True)
    finally:
        progress.hide_progress(False)
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize("command", cli.COMMANDS)
def test_every_command_takes_no_progress(command: str, capsys) -> None:
    assert cli.main([command, "--help"]) == 0
    assert "--no-progress" in capsys.readouterr().out


def test_a_logged_run_gets_summary_lines_not_bar_frames(tmp_path) -> None:
    # a whole command with stderr to a file: no carriage-return frames of a bar
    import pandas as pd

    pd.DataFrame({"lat": [1.0] * 6000, "lon": [2.0] * 6000, "when": ["2001"] * 6000}).to_csv(
        tmp_path / "t.csv", index=False)
    log = tmp_path / "log.txt"
    with open(log, "w") as fh:
        rc = subprocess.call([sys.executable, "-m", "envlink", "sites", str(tmp_path / "t.csv"), "-o",
                              str(tmp_path / "o.csv"), "--lat", "lat", "--lon", "lon", "--period", "when"],
                             stderr=fh, stdout=subprocess.DEVNULL)
    assert rc == 0
    text = log.read_text()
    assert "\r" not in text and "envlink sites: 6000 rows" in text
