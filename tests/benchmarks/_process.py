"""Timing whole processes for the benchmarks: wall time and the peak memory of every process.

:func:`run_measured` starts a command and, while it runs, reads the high-water mark of
resident memory (``VmHWM`` in ``/proc/PID/status``, Linux) of the process and of every
process it starts (readers, workers), every 10 ms; the peak memory reported is the
sum of each process's own high-water mark (an upper bound of what they held at once).
The main process is started through :func:`launcher`, which writes its own
high-water mark as it exits (sampling could miss a peak in its last milliseconds).
A process that executes a new program (a spawned process) is counted from then on: a
sample taken between its fork and its exec shows its parent's pages, not its own.
"""

from __future__ import annotations

import atexit
import os
import runpy
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

__all__ = ["run_measured", "summary", "launcher"]


def launcher(args: list[str]) -> list[str]:
    """The command that runs ``python ARGS`` (``-m module ...`` or ``script ...``) through this file."""
    return [sys.executable, str(Path(__file__).resolve()), *args]


def _children(pid: int) -> list[int]:
    out: list[int] = []
    try:
        tasks = os.listdir(f"/proc/{pid}/task")
    except OSError:
        return out
    for tid in tasks:
        try:
            text = Path(f"/proc/{pid}/task/{tid}/children").read_text()
        except OSError:
            continue
        out += [int(x) for x in text.split()]
    return out


def _tree(pid: int) -> list[int]:
    seen, todo = [], [pid]
    while todo:
        p = todo.pop()
        seen.append(p)
        todo += _children(p)
    return seen


def _vm_hwm_mib(pid: int) -> float | None:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return float(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


def _program(pid: int) -> bytes | None:
    """The command line of ``pid`` (it changes when the process executes a new program)."""
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return None


def run_measured(cmd: list[str], env: dict[str, str] | None = None, cwd: str | None = None) -> dict[str, object]:
    """Run ``cmd``; its wall time, the summed peak memory of its processes, its exit code."""
    fd, hwm_file = tempfile.mkstemp(prefix="bench-hwm-")
    os.close(fd)
    env = {**(env if env is not None else os.environ), "BENCH_HWM_FILE": hwm_file}
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peaks: dict[int, float] = {}
    programs: dict[int, bytes | None] = {}
    while proc.poll() is None:
        for pid in _tree(proc.pid):
            program, hwm = _program(pid), _vm_hwm_mib(pid)
            if hwm is None:
                continue
            if pid in programs and programs[pid] != program:
                # it executed a new program (a spawned process, sampled once between its
                # fork and its exec, showed its parent's pages): its own memory starts here
                peaks.pop(pid, None)
            programs[pid] = program
            peaks[pid] = max(peaks.get(pid, 0.0), hwm)
        time.sleep(0.01)
    wall = time.perf_counter() - t0
    text = Path(hwm_file).read_text().strip()
    os.unlink(hwm_file)
    if text:  # the main process's own last word
        peaks[proc.pid] = max(peaks.get(proc.pid, 0.0), float(text))
    err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited {proc.returncode}:\n{err[-3000:]}")
    return {"seconds": wall, "peak_mib": sum(peaks.values()), "processes": len(peaks),
            "peak_by_process_mib": sorted((round(v) for v in peaks.values()), reverse=True), "stderr": err[-2000:]}


def summary(xs: list[float]) -> dict[str, float]:
    """Median, min, max and count."""
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "n": len(xs)}


def _write_hwm() -> None:
    path = os.environ.get("BENCH_HWM_FILE")
    hwm = _vm_hwm_mib(os.getpid())
    if path and hwm is not None:
        Path(path).write_text(f"{hwm}\n")


if __name__ == "__main__":  # the launcher: run the module or script, then write VmHWM
    atexit.register(_write_hwm)
    args = sys.argv[1:]
    if args[0] == "-m":
        sys.argv = [args[1], *args[2:]]
        runpy.run_module(args[1], run_name="__main__", alter_sys=True)
    else:
        sys.argv = args
        runpy.run_path(args[0], run_name="__main__")
