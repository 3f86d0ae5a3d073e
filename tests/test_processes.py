"""Reader processes: spawned (or started by a fork server), not forked from the caller."""

from __future__ import annotations

import multiprocessing
import os
import signal
import sys

import numpy as np
import pytest

from envlink.core import processes
from envlink.core.processes import START_METHODS, start_method, worker_pool

#: Set at run time in the calling process; a forked worker would see it, a fresh one not.
MARK = "as imported"

not_fork = pytest.mark.skipif(start_method() == "fork", reason="readers are forked on this platform")


def _mark() -> str:
    return MARK


def _imported(name: str) -> bool:
    return name in sys.modules


def _own_peak_mib() -> float:
    """This process's high-water mark of resident memory (Linux ``VmHWM``)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return float(line.split()[1]) / 1024.0
    raise AssertionError("no VmHWM")


def test_start_method_default_spawns(monkeypatch):
    monkeypatch.delenv("ENVLINK_START_METHOD", raising=False)
    have = multiprocessing.get_all_start_methods()
    assert start_method() == next(m for m in START_METHODS if m in have) == "spawn"


def test_start_method_from_the_environment(monkeypatch):
    monkeypatch.setenv("ENVLINK_START_METHOD", " ForkServer ")
    assert start_method() == ("forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn")
    monkeypatch.setenv("ENVLINK_START_METHOD", "no-such-method")  # ignored: the default
    monkeypatch.delenv("ENVLINK_START_METHOD")
    default = start_method()
    monkeypatch.setenv("ENVLINK_START_METHOD", "no-such-method")
    assert start_method() == default


@not_fork
def test_workers_do_not_inherit_the_callers_state(monkeypatch):
    monkeypatch.setattr(sys.modules[__name__], "MARK", "changed in the caller")
    with worker_pool(1) as pool:
        assert pool.submit(_mark).result() == "as imported"


@not_fork
@pytest.mark.skipif(not os.path.exists("/proc/self/status"), reason="VmHWM is read from Linux /proc")
def test_workers_do_not_count_the_callers_memory():
    big = np.ones(256 * 2**20 // 8)  # 256 MiB resident in the caller
    parent = _own_peak_mib()
    with worker_pool(1) as pool:
        child = pool.submit(_own_peak_mib).result()
    assert big.sum() > 0
    # a forked worker would count the 256 MiB too (common practice: fork shares every resident page)
    assert child < parent - 200, (child, parent)


def test_workers_stop_at_once_on_stop_signals():
    with worker_pool(1) as pool:
        got = pool.submit(signal.getsignal, signal.SIGTERM).result()
    assert got == signal.SIG_DFL


@pytest.mark.parametrize("method", [m for m in START_METHODS if m in multiprocessing.get_all_start_methods()])
def test_every_method_runs_jobs(monkeypatch, method):
    monkeypatch.setenv("ENVLINK_START_METHOD", method)
    processes.warm_up(2)
    kept = processes._KEPT["pool"]
    processes.warm_up(1)  # two kept already: nothing more
    try:
        with processes.reader_pool(2) as pool:
            assert pool is kept
            assert [f.result() for f in [pool.submit(abs, -3), pool.submit(abs, 4)]] == [3, 4]
            # the readers imported the reading libraries this process uses as they started
            assert pool.submit(_imported, "numpy").result()
    finally:
        processes.close_reader_pool()
    assert "pool" not in processes._KEPT


@pytest.mark.parametrize("method", [m for m in ("spawn", "forkserver") if m in multiprocessing.get_all_start_methods()])
def test_a_script_without_main_guard_is_not_run_again(tmp_path, method):
    import subprocess
    from pathlib import Path

    script = tmp_path / "unguarded.py"
    log = tmp_path / "runs.txt"
    script.write_text(
        "import math, os\n"
        "from envlink.core.processes import worker_pool\n"
        f"with open({str(log)!r}, 'a') as fh:\n"
        "    fh.write('run\\n')\n"
        "with worker_pool(2) as pool:\n"
        "    print(pool.submit(math.hypot, 3.0, 4.0).result())\n"
    )
    root = str(Path(__file__).resolve().parents[1])
    env = {**os.environ, "PYTHONPATH": root, "ENVLINK_START_METHOD": method}
    done = subprocess.run([sys.executable, str(script)], env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == "5.0"
    assert log.read_text().count("run") == 1  # the readers did not import the script
