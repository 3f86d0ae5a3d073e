"""Connecting to a dask.distributed cluster: the one rule every stage that scales out uses."""

from __future__ import annotations

import contextlib
import os
import threading
from collections.abc import Iterator
from typing import Any

from envlink.errors import InputError

__all__ = ["connect", "on_cluster", "connect_timeout"]

#: Seconds :func:`connect` waits for a scheduler by default (``ENVLINK_SCHEDULER_TIMEOUT``).
DEFAULT_TIMEOUT = 10.0

#: Seconds beyond the timeout that the attempt may take to give up by itself before
#: :func:`connect` stops waiting for it.
_GRACE = 2.0


def connect_timeout() -> float:
    """Seconds to wait for a scheduler: ``ENVLINK_SCHEDULER_TIMEOUT``, else 10.

    Raises
    ------
    InputError
        The variable is set but is not a positive number of seconds.

    Examples
    --------
    >>> connect_timeout() > 0
    True
    """
    text = os.environ.get("ENVLINK_SCHEDULER_TIMEOUT", "").strip()
    if not text:
        return DEFAULT_TIMEOUT
    try:
        seconds = float(text)
    except ValueError:
        seconds = -1.0
    if not seconds > 0 or seconds == float("inf"):
        raise InputError(f"ENVLINK_SCHEDULER_TIMEOUT must be a number of seconds above 0; got {text!r}.")
    return seconds


def connect(scheduler: Any, *, timeout: float | None = None) -> Any:
    """A ``dask.distributed.Client``: the one given, or one connected to an address.

    The attempt to connect takes at most ``timeout`` seconds (default
    :func:`connect_timeout`: ``ENVLINK_SCHEDULER_TIMEOUT``, else 10) plus 2, whatever the
    other end does: a service that accepts the connection but never answers, or answers
    with something other than Dask's protocol (a web server, a scheduler's dashboard
    port), is reported like an address where nothing listens.

    Raises
    ------
    InputError
        dask.distributed is not installed, or no scheduler answers at the address (or it
        is not an address, e.g. no port, or what answers there is not a Dask scheduler).

    Examples
    --------
    >>> from distributed import LocalCluster  # doctest: +SKIP
    >>> client = connect(LocalCluster(n_workers=2).scheduler_address)  # doctest: +SKIP
    """
    try:
        from distributed import Client
    except ImportError:
        raise InputError("A cluster needs dask.distributed: pip install 'envlink[dask]'.") from None
    if isinstance(scheduler, Client):
        return scheduler
    seconds = connect_timeout() if timeout is None else float(timeout)
    address = str(scheduler)
    def make() -> Any:
        # a Client made for a service that is not a scheduler is left half open as dask's
        # default, holding every later compute() of this process: ask first
        _ask_identity(address, seconds)
        return Client(address, timeout=f"{seconds}s")

    try:
        return _attempt(make, seconds + _GRACE)
    except Exception as exc:  # noqa: BLE001 - whatever the other end did, the address is bad input
        raise InputError(f"No Dask scheduler answers at {address!r} ({_why(exc, seconds)}); the service "
                         "there may not be a Dask scheduler (a scheduler listens on port 8786 by default; "
                         "its dashboard, 8787, is a web page). Start one with `dask scheduler` and workers "
                         "with `dask worker ADDRESS` (docs/scaling.md).") from None


def _ask_identity(address: str, seconds: float) -> None:
    """Ask ``address`` who it is, within ``seconds``; an exception unless a Dask scheduler answers."""
    import asyncio

    from distributed.comm import connect as open_comm

    async def ask() -> Any:
        comm = await open_comm(address, timeout=seconds)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()

    reply = asyncio.run(asyncio.wait_for(ask(), seconds))
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise ConnectionError(f"what answers there is a {reply.get('type') if isinstance(reply, dict) else 'service'}"
                              ", not a Dask scheduler")


def _why(exc: BaseException, seconds: float) -> str:
    """The reason an attempt failed, in words."""
    if isinstance(exc, TimeoutError) and not str(exc):
        return f"no Dask reply within {seconds:g} s"
    if isinstance(exc, (OSError, TimeoutError, ValueError)):  # ValueError: not an address
        return str(exc) or type(exc).__name__
    return "it replied, but not in Dask's protocol"  # e.g. bytes of an HTTP reply read as a length


def _attempt(make: Any, deadline: float) -> Any:
    """``make()`` in a worker thread; its result, its exception, or TimeoutError after ``deadline`` s.

    distributed bounds the TCP connection but not the handshake read after it, so a
    service that never replies would hold the caller for ever. A client that arrives
    after the deadline is closed.
    """
    lock = threading.Lock()
    box: dict[str, Any] = {}

    def run() -> None:
        try:
            made = make()
        except BaseException as exc:  # noqa: BLE001 - handed to the caller
            made, box["error"] = None, exc
        with lock:
            if box.get("abandoned") and made is not None:
                made.close()
            box["client"] = made

    worker = threading.Thread(target=run, name="envlink-connect", daemon=True)
    worker.start()
    worker.join(deadline)
    with lock:
        if "client" not in box:
            box["abandoned"] = True
            raise TimeoutError()
    if "error" in box:
        raise box["error"]
    return box["client"]


@contextlib.contextmanager
def on_cluster(scheduler: Any) -> Iterator[Any]:
    """Run Dask work inside on the cluster of ``scheduler`` (a client or an address; None: as is).

    A client opened here from an address is closed on leaving; a client given stays open.
    """
    if scheduler is None:
        yield None
        return
    import dask

    client = connect(scheduler)
    try:
        with dask.config.set(scheduler=client):
            yield client
    finally:
        if client is not scheduler:
            client.close()
