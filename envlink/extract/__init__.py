"""The extract stage: covariates from grids attached to every row over per-row windows.

The public entry points are :func:`envlink.extract.attach.attach` (``envlink.attach``)
and :func:`envlink.extract.attach.attach_many` (several covariates, each cell read once).
Vocabularies (one registry each): ``rules`` (spatial rules, one module per rule),
``statistics`` and ``windows``. The pipeline: ``options`` (baselines), ``calendars``
and ``windows`` (per-row windows in the grid's calendar), ``spatial``, ``gaps`` and
``sources`` (which cells answer a site), ``covariates`` (several covariates in one
call), ``request`` (one covariate's options, times and rows), ``plan`` (the
:class:`ExtractionPlan`), ``reader`` (chunk-aware reading of cell series),
``series`` (each cell's series read once), ``store``, ``storefiles`` and
``segments`` (the on-disk cell-series store, keyed by grid identity and cell),
``codehash`` (the source of the decoding code, part of the store's key), ``stats``
(window kernels) and ``compute`` (blocks of sources), and ``attach`` (the stage).
"""

from __future__ import annotations

__all__ = ["attach", "attach_many"]


def __getattr__(name: str):  # noqa: ANN202
    if name in __all__:
        from envlink.extract.attach import attach, attach_many

        return {"attach": attach, "attach_many": attach_many}[name]
    raise AttributeError(f"module 'envlink.extract' has no attribute {name!r}")
