"""The extract stage: covariates from grids attached to every row over per-row windows.

The public entry point is :func:`envlink.extract.attach.attach` (``envlink.attach``).
Modules: ``options`` (string forms of statistics, windows, spatial rules),
``calendars`` and ``windows`` (per-row windows in the grid's calendar), ``spatial``
and ``sources`` (which cells answer a site), ``reader`` (chunk-aware reading of cell
series), ``stats`` and ``compute`` (window statistics, anomalies, heat stress),
``cache`` (on-disk results) and ``attach`` (the stage).
"""

from __future__ import annotations

__all__ = ["attach"]


def __getattr__(name: str):  # noqa: ANN202
    if name == "attach":
        from envlink.extract.attach import attach

        return attach
    raise AttributeError(f"module 'envlink.extract' has no attribute {name!r}")
