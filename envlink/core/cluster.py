"""Connecting to a dask.distributed cluster: the one rule every stage that scales out uses."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from typing import Any

from envlink.errors import InputError

__all__ = ["connect", "on_cluster"]


def connect(scheduler: Any) -> Any:
    """A ``dask.distributed.Client``: the one given, or one connected to an address.

    Raises
    ------
    InputError
        dask.distributed is not installed, or no scheduler answers at the address (or it
        is not an address, e.g. no port).

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
    try:
        return Client(str(scheduler), timeout="10s")
    except (OSError, TimeoutError, ValueError) as exc:  # ValueError: not an address
        raise InputError(f"No Dask scheduler answers at {str(scheduler)!r} ({exc}); start one "
                         "with `dask scheduler` and workers with `dask worker ADDRESS` "
                         "(docs/scaling.md).") from None


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
