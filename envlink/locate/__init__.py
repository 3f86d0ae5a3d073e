"""The locate stage: reported coordinates, site names and dates to validated sites and periods.

Modules: ``coords`` (coordinate text to decimal degrees), ``periods`` (date text to an
inclusive window), ``gazetteer`` (site names to coordinates from a user table) and
``sites`` (the :func:`envlink.locate.sites.locate` stage over a whole table).

The subpackage itself is callable, so ``envlink.locate(table, ...)`` runs the stage
while ``envlink.locate.coords`` stays importable. ``inspect.signature`` and ``help``
show the stage's own parameters (loaded on first use, so importing stays cheap).
"""

from __future__ import annotations

import inspect
import sys
import types
from typing import Any


def _stage() -> Any:
    from envlink.locate.sites import locate

    return locate


class _CallableModule(types.ModuleType):
    """A package that runs :func:`envlink.locate.sites.locate` when called."""

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        return _stage()(*args, **kwargs)

    @property
    def __signature__(self) -> inspect.Signature:
        """The signature of the stage (what ``inspect.signature(envlink.locate)`` shows)."""
        return inspect.signature(_stage())

    def _doc(self) -> str:
        """The package's docstring followed by the stage's (what ``help(envlink.locate)`` shows).

        The stage's examples stay in :func:`envlink.locate.sites.locate`, where they run.
        """
        stage = _stage()
        text = (inspect.getdoc(stage) or "").split("\nExamples\n--------")[0].rstrip()
        return (
            f"{self.__dict__.get('__doc__') or ''}\nCalling the package runs the stage "
            f"(examples in envlink.locate.sites.locate):\n\nlocate{inspect.signature(stage)}\n\n{text}\n"
        )

    def _set_doc(self, value: str | None) -> None:
        self.__dict__["__doc__"] = value

    __doc__ = property(_doc, _set_doc)  # type: ignore[assignment]

sys.modules[__name__].__class__ = _CallableModule
