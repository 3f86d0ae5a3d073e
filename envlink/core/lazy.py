"""Functions named by ``module:attribute`` and imported on first call, for cheap registries.

A registry that lists a stage's functions should not import the stage's heavy
libraries (SciPy, pandas, pyarrow) just to be read by the project file's schema or a
command's ``--help``. A :class:`LazyFunction` stands in for the function: it is
callable with the same arguments and imports its module the first time it is called.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from typing import Any

__all__ = ["LazyFunction"]


class LazyFunction:
    """A callable that imports ``module`` and calls its ``attribute`` on first use.

    Parameters
    ----------
    ref : str
        ``"package.module:function"``.

    Examples
    --------
    >>> hypot = LazyFunction("math:hypot")
    >>> hypot.__name__, hypot(3.0, 4.0)
    ('hypot', 5.0)
    """

    def __init__(self, ref: str) -> None:
        module, colon, attr = ref.partition(":")
        if not (module and colon and attr):
            raise ValueError(f"a lazy function is named 'module:attribute'; got {ref!r}")
        self.ref = ref
        self.__name__ = attr
        self._func: Callable[..., Any] | None = None

    def resolve(self) -> Callable[..., Any]:
        """The function itself (its module is imported now if it was not yet)."""
        if self._func is None:
            module, _, attr = self.ref.partition(":")
            self._func = getattr(importlib.import_module(module), attr)
        return self._func

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        return self.resolve()(*args, **kwargs)

    def __repr__(self) -> str:
        return f"LazyFunction({self.ref!r})"
