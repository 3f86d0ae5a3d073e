"""The report's vocabulary: the row orders of the forest plot, one registry.

:data:`FOREST_ORDERS` is read by :func:`envlink.report.write_report`
(``forest_order=``), by ``envlink fit`` and ``envlink report`` (``--forest-order``)
and by the table in docs/tutorial.md. Each entry's ``obj`` takes the effects, their
standard errors and their labels and returns the row positions, top row first.
This module imports no NumPy at import time, so the command line reads it cheaply.

Examples
--------
>>> [e.name for e in FOREST_ORDERS]
['effect', 'precision', 'label', 'table']
>>> FOREST_ORDERS["precision"].obj([0.1, 0.5, 0.3], [0.3, 0.1, 0.2], ["a", "b", "c"]).tolist()
[1, 2, 0]
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from envlink.core.registry import Entry, Registry

__all__ = ["FOREST_ORDERS"]


def _by_effect(y: Sequence[float], se: Sequence[float], labels: Sequence[str]) -> Any:
    import numpy as np

    return np.argsort(-np.asarray(y, dtype=float), kind="stable")


def _by_precision(y: Sequence[float], se: Sequence[float], labels: Sequence[str]) -> Any:
    import numpy as np

    return np.argsort(np.asarray(se, dtype=float), kind="stable")


def _by_label(y: Sequence[float], se: Sequence[float], labels: Sequence[str]) -> Any:
    import numpy as np

    return np.asarray(sorted(range(len(labels)), key=lambda i: str(labels[i]).casefold()), dtype=int)


def _by_table(y: Sequence[float], se: Sequence[float], labels: Sequence[str]) -> Any:
    import numpy as np

    return np.arange(len(y))


#: Row orders of the forest plot (``forest_order=``, ``--forest-order``).
FOREST_ORDERS: Registry[Any] = Registry("forest plot order", param="forest_order",
                                        caller="write_report")
FOREST_ORDERS.add(Entry("effect", "largest effect at the top (the default)", obj=_by_effect,
                        aliases=("effect-size",)))
FOREST_ORDERS.add(Entry("precision", "most precise effect (smallest standard error) at the top",
                        obj=_by_precision, aliases=("standard-error",)))
FOREST_ORDERS.add(Entry("label", "by the label column, A to Z", obj=_by_label))
FOREST_ORDERS.add(Entry("table", "in the order of the table's rows", obj=_by_table,
                        aliases=("rows",)))
