"""One exception and warning hierarchy for every envlink stage.

Every error a user can cause derives from :class:`EnvlinkError` and from the most
accurate builtin, so ``except ValueError`` keeps working for callers who do not
know envlink. The command line maps :class:`InputError` to exit code 2 and every
other :class:`EnvlinkError` to exit code 1.

Every warning class of the package is defined here too (the stage modules that
issue them re-export them under their old names), and :func:`warn` issues them at
the user's stack level: the warning points at the first caller outside envlink.
"""

from __future__ import annotations

import os
import sys
import types
import warnings

__all__ = [
    "EnvlinkError",
    "InputError",
    "FieldError",
    "GridError",
    "ModelError",
    "ModelOptionError",
    "NotFittedError",
    "EnvlinkWarning",
    "GridWarning",
    "ValidRangeWarning",
    "CacheWarning",
    "BackTransformWarning",
    "MetaRegressionWarning",
    "DiagnosticWarning",
    "TableWarning",
    "InvalidValueError",
    "TooFewRowsError",
    "param_error",
    "user_stacklevel",
    "warn",
]


class EnvlinkError(Exception):
    """Base class of every error envlink raises on purpose."""


class InputError(EnvlinkError, ValueError):
    """Bad user input: a missing column, an unreadable table, a bad option value.

    Attributes
    ----------
    param : str or None
        The Python parameter the message is about, when it is about one (set by
        :func:`param_error`); the command line adds the matching option's name.

    Examples
    --------
    >>> import pickle
    >>> err = pickle.loads(pickle.dumps(InputError("bad value", param="spatial")))
    >>> str(err), err.param
    ('bad value', 'spatial')
    """

    def __init__(self, *args: object, param: str | None = None) -> None:
        super().__init__(*args)
        self.param = param  # in __dict__, which BaseException pickles with the args


class FieldError(InputError):
    """One cell of a table that cannot be used: its field, a reason and a short QA code.

    The locate stage turns it into a rejected row (the code in ``locate_flags``, the
    message in ``locate_notes``) instead of stopping the run.

    Attributes
    ----------
    field : str
        The field the text was read for (e.g. ``"lat"``, ``"period"``).
    reason : str
        Short human reason, naming the offending value.
    code : str
        Short lower-case QA code, e.g. ``"lat_out_of_range"``.
    text : str
        The text that was given.

    Examples
    --------
    >>> str(FieldError("period", "month 13 does not exist", "impossible_date", "2011-13"))
    "Cannot read period '2011-13': month 13 does not exist [impossible_date]."
    """

    def __init__(self, field: str, reason: str, code: str, text: str = "") -> None:
        super().__init__(field, reason, code, text)  # all four in args: pickles
        self.field = field
        self.reason = reason
        self.code = code
        self.text = text

    def __str__(self) -> str:
        shown = f" {self.text!r}" if self.text else ""
        return f"Cannot read {self.field}{shown}: {self.reason} [{self.code}]."


class GridError(EnvlinkError, OSError):
    """A grid that cannot be opened, decoded or understood."""


class ModelError(EnvlinkError, ArithmeticError):
    """A meta-regression that cannot be fitted as asked."""


class InvalidValueError(InputError, ModelError):
    """A value in the data that a model cannot use: bad input (the command line exits 2).

    A sampling variance that is zero, negative or infinite, an infinite effect, or a
    number too large for float64 sums. It is also a :class:`ModelError`, so callers
    that caught those before keep catching it.

    Examples
    --------
    >>> issubclass(InvalidValueError, ValueError) and issubclass(InvalidValueError, ArithmeticError)
    True
    """


class ModelOptionError(InputError, ModelError):
    """An option the model cannot take as asked: bad usage (the command line exits 2).

    A permutation scheme that needs nested groups on a model without them, or a
    permutation test of a model without moderators. It is also a :class:`ModelError`,
    so callers that caught those before keep catching it.

    Examples
    --------
    >>> issubclass(ModelOptionError, InputError) and issubclass(ModelOptionError, ModelError)
    True
    """


class TooFewRowsError(InputError, ModelError):
    """Too few usable rows to fit the model asked for: bad input (the command line exits 2).

    A property of the data, the same from ``envlink fit``, ``envlink scan``, a project's
    [model] and ``MetaRegression.fit``. It is also a :class:`ModelError`, so callers that
    caught those before keep catching it.

    Examples
    --------
    >>> issubclass(TooFewRowsError, InputError) and issubclass(TooFewRowsError, ModelError)
    True
    """


class NotFittedError(ModelError, AttributeError):
    """A fitted attribute or result was asked for before ``fit()``.

    Examples
    --------
    >>> issubclass(NotFittedError, AttributeError) and issubclass(NotFittedError, ModelError)
    True
    """


class EnvlinkWarning(UserWarning):
    """Base class of every warning envlink issues."""


class TableWarning(EnvlinkWarning):
    """A table read with a repair the user should know of (mixed encodings, a blank header cell)."""


class GridWarning(EnvlinkWarning):
    """Something about a grid that may make its numbers wrong or its reading slow."""


class ValidRangeWarning(GridWarning):
    """A valid range that looks stated in unpacked units."""


class CacheWarning(EnvlinkWarning):
    """The cell-series store could not be read or written; the run goes on without it."""


class BackTransformWarning(EnvlinkWarning):
    """A back-transformation whose result needs care (see its docstring)."""


class MetaRegressionWarning(EnvlinkWarning):
    """A fit that ran but needs the user's attention (non-convergence, dropped rows)."""


class DiagnosticWarning(EnvlinkWarning):
    """A diagnostic finished, but its result needs care (see the message)."""


_PACKAGE_DIR = os.path.dirname(os.path.abspath(__file__)) + os.sep


def user_stacklevel() -> int:
    """The ``stacklevel`` that points a warning at the first caller outside envlink.

    Counted from the function that calls this one (the function that warns), so
    ``warnings.warn(message, category, stacklevel=user_stacklevel())`` names the
    user's line however deep inside envlink the warning arises.

    Examples
    --------
    >>> user_stacklevel() >= 1
    True
    """
    frame: types.FrameType | None = sys._getframe(1)
    level = 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(_PACKAGE_DIR):
        frame = frame.f_back
        level += 1
    return level


def warn(message: str, category: type[EnvlinkWarning] = EnvlinkWarning) -> None:
    """Issue an envlink warning at the user's stack level (see :func:`user_stacklevel`).

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     warn("cells were masked", GridWarning)
    >>> caught[0].category.__name__, str(caught[0].message)
    ('GridWarning', 'cells were masked')
    """
    warnings.warn(message, category, stacklevel=user_stacklevel())


def param_error(param: str, caller: str, allowed: str, value: object) -> InputError:
    """Build the one parameter-validation message template of the project.

    Parameters
    ----------
    param : str
        Name of the parameter.
    caller : str
        The function or command that received it.
    allowed : str
        Plain-words description of what is allowed.
    value : object
        The value that was given.

    Returns
    -------
    InputError
        Ready to raise; its ``param`` attribute holds ``param``.

    Examples
    --------
    >>> str(param_error("method", "fit", "one of 'REML', 'ML'", "XX"))
    "The 'method' parameter of fit must be one of 'REML', 'ML'; got 'XX'."
    """
    return InputError(f"The {param!r} parameter of {caller} must be {allowed}; got {value!r}.", param=param)
