"""Stop signals (envlink.commands.signals) and grouped atomic writes (envlink.core.util.atomic_group).

The per-command checks (each command stopped by SIGINT, SIGTERM and SIGHUP while a
temporary file exists) are the ``interrupts`` cases of tests/badinput.
"""

from __future__ import annotations

import os
import signal
from pathlib import Path

import pytest

from envlink.commands.signals import Stopped, exit_code, stop_on_signals
from envlink.core.util import atomic_group, atomic_path

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGHUP"), reason="POSIX signals")


@pytest.mark.parametrize("name", ["SIGINT", "SIGTERM", "SIGHUP"])
def test_each_stop_signal_raises_once_and_handlers_come_back(name: str) -> None:
    sig = getattr(signal, name)
    before = signal.getsignal(sig)
    with pytest.raises(Stopped) as caught, stop_on_signals():
        os.kill(os.getpid(), sig)
    assert caught.value.signum == sig and exit_code(sig) == 128 + sig  # the shell's rule
    assert signal.getsignal(sig) == before


def test_a_second_signal_does_not_cut_the_clean_up_short(tmp_path: Path) -> None:
    cleaned = []
    with pytest.raises(Stopped), stop_on_signals():
        try:
            os.kill(os.getpid(), signal.SIGTERM)
        finally:
            os.kill(os.getpid(), signal.SIGTERM)  # ignored: the clean-up goes on
            cleaned.append(True)
    assert cleaned == [True]


def test_an_ignored_signal_stays_ignored() -> None:
    old = signal.signal(signal.SIGHUP, signal.SIG_IGN)  # as nohup leaves it
    try:
        with stop_on_signals():
            os.kill(os.getpid(), signal.SIGHUP)  # nothing happens
            assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
    finally:
        signal.signal(signal.SIGHUP, old)


def test_a_group_lands_together_or_not_at_all(tmp_path: Path) -> None:
    for name in ("a.csv", "b.csv"):
        (tmp_path / name).write_text("previous")
    with pytest.raises(Stopped), stop_on_signals(), atomic_group():
        with atomic_path(tmp_path / "a.csv") as tmp:
            tmp.write_text("new")
        with atomic_path(tmp_path / "b.csv") as tmp:
            tmp.write_text("new")
            os.kill(os.getpid(), signal.SIGTERM)  # stopped while b is being written
    assert [(tmp_path / n).read_text() for n in ("a.csv", "b.csv")] == ["previous", "previous"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.csv", "b.csv"]  # no temporary file
    with atomic_group():
        for name in ("a.csv", "b.csv"):
            with atomic_path(tmp_path / name) as tmp:
                tmp.write_text("new")
        assert (tmp_path / "a.csv").read_text() == "previous"  # renamed only at the end
    assert [(tmp_path / n).read_text() for n in ("a.csv", "b.csv")] == ["new", "new"]


@pytest.mark.parametrize(("name", "command"), [("SIGINT", "demo"), ("SIGTERM", "fit"), ("SIGHUP", "--help")])
def test_a_stop_while_the_command_line_starts_is_one_clean_line(tmp_path: Path, name: str, command: str) -> None:
    # the shell's rule (128 + N) and envlink's one-line stop message, with no traceback, also
    # while the command modules (pandas, pyarrow, ...) are imported: ENVLINK_TEST_PAUSE_START
    # holds the process just before that, with the handlers already set
    import subprocess
    import sys
    import time

    import envlink

    sig = getattr(signal, name)
    marker = tmp_path / ".started"
    env = {**os.environ, "ENVLINK_TEST_PAUSE_START": str(marker),
           "PYTHONPATH": str(Path(envlink.__file__).resolve().parents[1])}
    argv = {"demo": ["demo", "--out", "d", "--force"], "fit": ["fit", "t.csv", "--effect", "y", "--variance", "v"],
            "--help": ["--help"]}[command]
    proc = subprocess.Popen([sys.executable, "-m", "envlink", *argv], cwd=tmp_path, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)
    try:
        deadline = time.monotonic() + 60
        while not marker.exists():
            assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
            time.sleep(0.02)
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 128 + sig, err
    assert err == (f"envlink: stopped by {name}; previous outputs were left as they were and no partial "
                   "output was left.\n"), err
    assert out == "" and sorted(p.name for p in tmp_path.iterdir()) == [".started"]  # nothing written
