"""How the command line names Python parameters: messages of the library, shown with option names.

The library's messages name the Python parameter (``The 'spatial' parameter of
attach ...``, ``pass force=True``); each command module declares, next to its
argparse options, a ``PARAM_OPTIONS`` mapping from the Python parameters it sets to
its options. When a message reaches the command line, :func:`command_line_message`
adds the option to a parameter error (:attr:`envlink.errors.InputError.param`) and
:func:`command_line_text` writes every ``param=value`` mention as the option
(``plain_season_south='austral'`` -> ``--plain-season-south austral``).
"""

from __future__ import annotations

import re
import shlex
from collections.abc import Mapping
from typing import Any, TypeAlias

__all__ = ["ParamOptions", "option_names", "command_line_text", "command_line_message"]

#: Python parameter -> its option (``"--spatial"``), or -> {Python value: option} for a
#: parameter that several flags set (``{"dayfirst": "--dayfirst", ...}``); the key
#: ``...`` (Ellipsis) names the option that takes any other value.
ParamOptions: TypeAlias = Mapping[str, "str | Mapping[Any, str]"]

# a Python literal after ``param=``: True / False / None, a quoted text, a number
_VALUE = r"""(?P<value>True|False|None|'[^'\n]*'|"[^"\n]*"|-?\d+(?:\.\d+)?|[A-Z][A-Z_]*(?![\w(]))?"""
# a mention ends where the literal ends; a list, call or dict value is left alone
_END = r"(?![\w\[\(\{'\"])"
_BARE = object()


def option_names(spec: str | Mapping[Any, str]) -> list[str]:
    """The options of one parameter, in order.

    Examples
    --------
    >>> option_names("--spatial"), option_names({False: "--static", ...: "--time"})
    (['--spatial'], ['--static', '--time'])
    """
    if isinstance(spec, str):
        return [spec]
    return list(dict.fromkeys(spec.values()))


def _mentions_option(text: str, spec: str | Mapping[Any, str]) -> bool:
    return any(re.search(rf"{re.escape(name)}(?![\w-])", text) for name in option_names(spec))


def _literal(text: str | None) -> Any:
    if text is None:
        return _BARE
    if text in ("True", "False", "None"):
        return {"True": True, "False": False, "None": None}[text]
    if text[0] in "'\"":
        return text[1:-1]
    return text  # a number, kept as written


def _render(spec: str | Mapping[Any, str], value_text: str | None, original: str) -> str:
    value = _literal(value_text)
    if not isinstance(spec, str):
        if value is not _BARE and not isinstance(value, float) and value in spec:
            return spec[value]  # a flag that sets this value
        if ... not in spec:
            return original
        spec = spec[...]
    if value is _BARE or value is True:
        return spec
    if value is False or value is None:
        return original  # no option says "not given"
    return f"{spec} {shlex.quote(str(value))}"


def command_line_text(text: str, options: ParamOptions) -> str:
    """``text`` with every ``param=value`` mention of a parameter in ``options`` as its option.

    A parameter whose option the text already names is left as it is (the message
    carries both names).

    Examples
    --------
    >>> opts = {"force": "--force", "order": {"dayfirst": "--dayfirst", "monthfirst": "--monthfirst"},
    ...         "variable": "--var", "time": {False: "--static", ...: "--time"}}
    >>> command_line_text("exists; pass force=True to replace it.", opts)
    'exists; pass --force to replace it.'
    >>> command_line_text("give order='dayfirst' or order='monthfirst'", opts)
    'give --dayfirst or --monthfirst'
    >>> command_line_text("name it with time='NAME', or open it with time=False.", opts)
    'name it with --time NAME, or open it with --static.'
    >>> command_line_text("fit the model with variable=NAME first.", opts)
    'fit the model with --var NAME first.'
    >>> command_line_text("choose with variable='NAME' (--var NAME on the command line)", opts)
    "choose with variable='NAME' (--var NAME on the command line)"
    """
    for param, spec in options.items():
        if f"{param}=" not in text or _mentions_option(text, spec):
            continue
        pattern = re.compile(rf"(?<![\w.\-]){re.escape(param)}={_VALUE}{_END}")
        text = pattern.sub(lambda m, s=spec: _render(s, m.group("value"), m.group(0)), text)  # type: ignore[misc]
    return text


def command_line_message(exc: BaseException, options: ParamOptions) -> str:
    """The text of ``exc`` for the command line: its parameter named as its option, mentions translated.

    A parameter error (``The 'spatial' parameter of attach ...``) names the option in
    place of the Python parameter and function; another message about a parameter gets
    the option added at its end.

    Examples
    --------
    >>> from envlink.errors import param_error
    >>> err = param_error("spatial", "attach", "one of 'nearest', 'bilinear'", "x")
    >>> command_line_message(err, {"spatial": "--spatial"})
    "The option --spatial must be one of 'nearest', 'bilinear'; got 'x'."
    """
    text = command_line_text(str(exc), options)
    param = getattr(exc, "param", None)
    spec = options.get(param) if isinstance(param, str) else None
    if spec is None:
        return text
    if _mentions_option(text, spec):
        return text
    names = option_names(spec)
    label = ("option " if len(names) == 1 else "options ") + " or ".join(names)
    # the Python function and parameter give way to the option (the command is named before)
    head = re.compile(rf"^The {re.escape(repr(param))} parameter of [\w.]+(\([^()]*\))?")
    if head.search(text):
        return head.sub(f"The {label}", text, count=1)
    return f"{text} (command-line {label})"
