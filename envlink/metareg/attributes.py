"""Fitted attributes of the meta-regression: declared on the class, a clear error before ``fit``.

:class:`Fitted` declares an attribute that ``fit()`` sets (``coef_``, ``tau2_``, ...):
it is listed by ``dir()`` and by editors, carries its docstring, and reading it on
an unfitted model raises :class:`NotFittedError` (an ``AttributeError``, so
``hasattr(model, "coef_")`` is False until the model is fitted). Once fitted, the
value lives in the instance and is read directly (no descriptor call).

:class:`Derived` is a statistic computed on first use with the notes that explain
it (e.g. why R² is null), so reading it never changes another result.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Generic, TypeVar

from envlink.errors import MetaRegressionWarning, ModelError, NotFittedError

__all__ = ["Fitted", "Derived", "NotFittedError", "MetaRegressionWarning", "option_error"]

T = TypeVar("T")




def option_error(name: str, needs: str) -> ModelError:
    """The error for a statistic that the model's options do not define.

    It is also an ``AttributeError`` (``hasattr`` is False), and it names the option.

    Examples
    --------
    >>> print(option_error("I2_components_", "nested=COLUMN (the multilevel model)"))
    I2_components_ is defined only for a model fitted with nested=COLUMN (the multilevel model); this model was fitted without it.
    """
    return _OptionError(f"{name} is defined only for a model fitted with {needs}; this model "
                        "was fitted without it.")


class _OptionError(ModelError, AttributeError):
    """A statistic the model's options do not define (see :func:`option_error`)."""


class Fitted:
    """Declares a fitted attribute: documented on the class, :class:`NotFittedError` before fit.

    Parameters
    ----------
    doc : str
        What the attribute holds (shown by ``help()`` and editors).

    Examples
    --------
    >>> class Model:
    ...     coef_ = Fitted("the coefficients")
    >>> m = Model()
    >>> hasattr(m, "coef_"), "coef_" in dir(m)
    (False, True)
    >>> m.coef_ = [1.0]
    >>> m.coef_
    [1.0]
    """

    def __init__(self, doc: str) -> None:
        self.__doc__ = doc
        self.name = ""
        self.owner = ""

    def __set_name__(self, owner: type, name: str) -> None:
        self.name = name
        self.owner = owner.__name__

    def __get__(self, obj: Any, objtype: type | None = None) -> Any:
        if obj is None:
            return self
        # reached only while the instance has no value of its own, i.e. before fit()
        raise NotFittedError(f"{self.owner} has no fitted attribute {self.name!r}: this "
                             f"{self.owner} is not fitted yet; call fit(...) first.")


@dataclass(frozen=True)
class Derived(Generic[T]):
    """A statistic computed after the fit, with the notes that explain it."""

    value: T
    notes: tuple[str, ...] = field(default_factory=tuple)
