"""Worker processes for reading grids: the one way every envlink pool starts its processes.

Reader processes are spawned (a fresh interpreter each, the ``spawn`` start method of
:mod:`multiprocessing`), not forked from the envlink process: a forked reader would
hold, and count in its resident memory, every page of its parent (the table, the
series already read, the libraries): a few hundred MiB each. A spawned reader imports
only what its job needs (NumPy, xarray and the grid's file library), while the envlink
process reads too (:mod:`envlink.extract.reader`), so its start-up costs no waiting.

``$ENVLINK_START_METHOD`` chooses another method: ``forkserver`` (readers forked
from a small server started once, which imports the reading libraries this process
uses, :data:`READER_LIBRARIES`: quicker starts, but each reader then counts the
server's pages too; measured in tests/benchmarks/README.md) or ``fork``.

What a reader runs and receives is pickled: module-level functions, and arguments
that name files and slices (a lazily loaded xarray array pickles as its file and
selection, not its values). Readers do not import the caller's main script (a script
without an ``if __name__ == "__main__":`` guard would otherwise run again in each),
and stop at once on SIGINT, SIGTERM and SIGHUP (they hold no output of their own; the
envlink process cleans up).
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import sys
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from multiprocessing.context import BaseContext
from typing import Any

__all__ = ["worker_pool", "reader_pool", "close_reader_pool", "run_shared", "warm_up", "release_freed_memory", "start_method",
           "READER_LIBRARIES", "START_METHODS"]

#: Libraries a fork server imports when this process has imported them already.
READER_LIBRARIES = ("numpy", "pandas", "xarray", "netCDF4", "h5py", "h5netcdf", "zarr", "dask", "dask.array",
                    "cftime", "numcodecs")
#: The start methods ``$ENVLINK_START_METHOD`` may name; the first the platform has is the default.
START_METHODS = ("spawn", "forkserver", "fork")


def start_method() -> str:
    """The start method of envlink's worker processes on this platform.

    ``$ENVLINK_START_METHOD`` when it names a method this platform has, else the
    first of :data:`START_METHODS` that it has.

    Examples
    --------
    >>> start_method() in START_METHODS
    True
    """
    have = multiprocessing.get_all_start_methods()
    chosen = os.environ.get("ENVLINK_START_METHOD", "").strip().lower()
    if chosen in START_METHODS and chosen in have:
        return chosen
    return next(m for m in START_METHODS if m in have)


def _context() -> BaseContext:
    method = start_method()
    ctx = multiprocessing.get_context(method)
    if method == "forkserver":
        # only the libraries this process uses: the server is started once, by the first pool
        ctx.set_forkserver_preload(_libraries())  # type: ignore[attr-defined]
    return ctx


def warm_up(workers: int) -> None:
    """Start the kept readers (:func:`reader_pool`) now, so that they are ready when the
    first read comes: each imports the reading libraries this process uses (out of
    :data:`READER_LIBRARIES`) while this process goes on.

    Call it when reads by ``workers`` reader processes are likely soon (a large
    file-backed grid and no stored series). Nothing when readers are kept already.

    Examples
    --------
    >>> warm_up(1)
    >>> close_reader_pool()
    """
    with reader_pool(workers, preload=True):
        pass


def _libraries() -> list[str]:
    """The reading libraries this process has imported (a reader will need the same)."""
    return [m for m in READER_LIBRARIES if m in sys.modules]


def release_freed_memory() -> None:
    """Give the memory this process has freed back to the system (glibc's ``malloc_trim``).

    After a read of many large blocks in turn, glibc keeps the freed blocks for reuse
    and they go on counting as this process's resident memory; a reader calls this
    after each block. Does nothing where the C library has no ``malloc_trim``.

    Examples
    --------
    >>> release_freed_memory()
    """
    global _TRIM
    if _TRIM is None:
        import ctypes
        import ctypes.util

        try:
            _TRIM = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6").malloc_trim
        except (OSError, AttributeError):
            _TRIM = False
    if _TRIM:
        _TRIM(0)


_TRIM: Any = None


def _start_reader(libraries: list[str]) -> None:
    """In a new reader: the stop signals end it at once (no clean-up of its own to run);
    the ``libraries`` imported now, before its first job."""
    import importlib

    for name in libraries:
        with contextlib.suppress(ImportError):
            importlib.import_module(name)
    for name in ("SIGINT", "SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) is not signal.SIG_IGN:
            signal.signal(sig, signal.SIG_DFL)


def worker_pool(workers: int, preload: bool = False) -> ProcessPoolExecutor:
    """A pool of ``workers`` reader processes started the envlink way (see the module).

    Parameters
    ----------
    workers : int
        Number of processes (at least 1).
    preload : bool, default False
        Each process imports the reading libraries this process uses as it starts
        (else only when its first job needs them).

    Returns
    -------
    concurrent.futures.ProcessPoolExecutor
        Use it as a context manager; submit module-level functions.

    Examples
    --------
    >>> import math
    >>> with worker_pool(1) as pool:
    ...     pool.submit(math.hypot, 3.0, 4.0).result()
    5.0
    """
    n = max(1, int(workers))
    pool = ProcessPoolExecutor(max_workers=n, mp_context=_context(), initializer=_start_reader,
                               initargs=(_libraries() if preload else [],))
    with _main_hidden():  # the processes start now, without the caller's main script
        for _ in range(n):
            pool.submit(int)
    return pool


@contextlib.contextmanager
def _main_hidden() -> Iterator[None]:
    """While processes start: the main module shows no file and no name, so that a new
    process (spawned, or forked by a fork server) does not import the caller's script."""
    main = sys.modules.get("__main__")
    if main is None or start_method() == "fork":
        yield
        return
    saved: dict[str, Any] = {k: main.__dict__[k] for k in ("__file__", "__spec__") if k in main.__dict__}
    main.__dict__.pop("__file__", None)
    main.__dict__["__spec__"] = None
    try:
        yield
    finally:
        main.__dict__.pop("__spec__", None)
        main.__dict__.update(saved)


_KEPT: dict[str, Any] = {}


@contextlib.contextmanager
def reader_pool(workers: int, preload: bool = False) -> Iterator[ProcessPoolExecutor]:
    """:func:`worker_pool`, kept for the next read of this process (one set of readers
    for all the reads of a run: their start-up is paid once, and a second read does not
    start new processes). A kept pool of at least ``workers`` processes is reused.
    :func:`close_reader_pool` ends it (also at exit); a read that fails ends it too.

    Examples
    --------
    >>> import math
    >>> with reader_pool(1) as pool:
    ...     first = pool.submit(math.hypot, 3.0, 4.0).result()
    >>> with reader_pool(1) as again:
    ...     print(first, again is pool)
    5.0 True
    >>> close_reader_pool()
    """
    n, how = max(1, int(workers)), (start_method(), os.getpid())
    kept = _KEPT.get("key")
    if kept is None or kept[1:] != how or kept[0] < n or getattr(_KEPT.get("pool"), "_broken", False):
        close_reader_pool()
        if not _KEPT.get("atexit"):
            import atexit

            atexit.register(close_reader_pool)
            _KEPT["atexit"] = True
        _KEPT.update(key=(n, *how), pool=worker_pool(n, preload=preload))
    try:
        yield _KEPT["pool"]
    except BaseException:
        close_reader_pool(wait=False)
        raise


def close_reader_pool(wait: bool = True) -> None:
    """End the reader processes kept by :func:`reader_pool` (nothing when none are kept).

    Examples
    --------
    >>> close_reader_pool()
    """
    pool = _KEPT.pop("pool", None)
    _KEPT.pop("key", None)
    if pool is not None:
        pool.shutdown(wait=wait, cancel_futures=True)


def run_shared(fn: Callable[..., Any], jobs: Sequence[tuple], workers: int,
               done: Callable[[int, Any], None]) -> None:
    """``fn(*jobs[k])`` for every job, in ``workers`` kept readers (:func:`reader_pool`)
    and in this process at once; ``done(k, result)`` is called here as each ends.

    This process takes a job whenever the readers have two each queued, so it reads
    while they start and never only waits. An exception of a job is raised here.

    Examples
    --------
    >>> import math
    >>> got = {}
    >>> run_shared(math.hypot, [(3.0, 4.0), (5.0, 12.0), (8.0, 15.0)], 1, got.__setitem__)
    >>> [got[k] for k in range(3)]
    [5.0, 13.0, 17.0]
    >>> close_reader_pool()
    """
    from concurrent.futures import FIRST_COMPLETED, Future, wait

    todo = list(range(len(jobs)))[::-1]
    pending: dict[Future, int] = {}
    with reader_pool(workers, preload=True) as pool:
        while todo or pending:
            while todo and len(pending) < 2 * max(1, workers):
                k = todo.pop()
                pending[pool.submit(fn, *jobs[k])] = k
            finished = {f for f in pending if f.done()}
            if todo:
                k = todo.pop()
                done(k, fn(*jobs[k]))
            elif not finished:
                finished = wait(set(pending), return_when=FIRST_COMPLETED).done
            for fut in finished:
                done(pending.pop(fut), fut.result())

