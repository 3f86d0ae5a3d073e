"""The locate stage: reported coordinates, site names and dates to validated sites and periods.

Modules: ``coords`` (coordinate text to decimal degrees), ``periods`` (date text to an
inclusive window), ``gazetteer`` (site names to coordinates from a user table) and
``sites`` (the :func:`envlink.locate.sites.locate` stage over a whole table).

The subpackage itself is callable, so ``envlink.locate(table, ...)`` runs the stage
while ``envlink.locate.coords`` stays importable.
"""

from __future__ import annotations

import sys
import types
from typing import Any


class _CallableModule(types.ModuleType):
    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        from envlink.locate.sites import locate

        return locate(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
