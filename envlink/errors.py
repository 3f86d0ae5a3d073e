"""One exception and warning hierarchy for every envlink stage.

Every error a user can cause derives from :class:`EnvlinkError` and from the most
accurate builtin, so ``except ValueError`` keeps working for callers who do not
know envlink. The command line maps :class:`InputError` to exit code 2 and every
other :class:`EnvlinkError` to exit code 1.
"""

from __future__ import annotations

__all__ = [
    "EnvlinkError",
    "InputError",
    "FieldError",
    "GridError",
    "ModelError",
    "EnvlinkWarning",
    "param_error",
]


class EnvlinkError(Exception):
    """Base class of every error envlink raises on purpose."""


class InputError(EnvlinkError, ValueError):
    """Bad user input: a missing column, an unreadable table, a bad option value."""


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


class EnvlinkWarning(UserWarning):
    """Base class of every warning envlink issues."""


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
        Ready to raise.

    Examples
    --------
    >>> str(param_error("method", "fit", "one of 'REML', 'ML'", "XX"))
    "The 'method' parameter of fit must be one of 'REML', 'ML'; got 'XX'."
    """
    return InputError(f"The {param!r} parameter of {caller} must be {allowed}; got {value!r}.")
