"""The package's public surface: every exported name resolves, the CLI answers --help."""

from __future__ import annotations

import subprocess
import sys

import pytest

import envlink
from envlink import cli


@pytest.mark.parametrize("name", envlink.__all__)
def test_every_public_name_resolves(name: str) -> None:
    assert getattr(envlink, name) is not None


def test_locate_subpackage_is_callable_and_importable() -> None:
    import envlink.locate.coords  # noqa: F401  (submodule import must not break the call)

    assert callable(envlink.locate)


def test_locate_shows_the_stage_signature() -> None:
    import inspect

    from envlink.locate.sites import locate

    params = inspect.signature(envlink.locate).parameters
    assert {"table", "lat", "lon", "coords", "site", "gazetteer", "period", "start", "end", "order",
            "plain_season_south", "season_months", "fuzzy_threshold", "fuzzy_margin"} <= set(params)
    assert inspect.signature(envlink.locate) == inspect.signature(locate)


def test_help_of_locate_shows_the_stage_parameters() -> None:
    import pydoc

    text = pydoc.render_doc(envlink.locate, renderer=pydoc.plaintext)
    assert "The locate stage: reported coordinates" in text  # the package's own docstring
    for word in ("lat, lon : str", "period : str", "plain_season_south", "fuzzy_margin", "locate(table"):
        assert word in text, word
    assert ">>>" not in text  # the stage's examples run where they are written, not twice


def test_import_locate_stays_cheap() -> None:
    code = ("import sys, envlink.locate; "
            "print(sorted(m for m in ('pandas', 'numpy', 'envlink.locate.sites') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_error_hierarchy_subclasses_builtins() -> None:
    assert issubclass(envlink.InputError, ValueError)
    assert issubclass(envlink.GridError, OSError)
    assert issubclass(envlink.ModelError, ArithmeticError)
    assert issubclass(envlink.InputError, envlink.EnvlinkError)


def test_every_command_is_registered_and_has_help(capsys: pytest.CaptureFixture[str]) -> None:
    parser = cli.build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    assert sorted(sub.choices) == sorted(cli.COMMANDS)  # type: ignore[union-attr]
    for name in cli.COMMANDS:
        assert cli.main([name, "--help"]) == 0
        assert "usage: envlink " + name in capsys.readouterr().out


def test_console_entry_point_runs() -> None:
    out = subprocess.run(
        [sys.executable, "-m", "envlink", "--help"], capture_output=True, text=True, check=False
    )
    assert out.returncode == 0
    assert "usage: envlink" in out.stdout and "COMMAND" in out.stdout


def test_no_command_is_usage_error(capsys: pytest.CaptureFixture[str]) -> None:
    assert cli.main([]) == 2


def test_envlink_warnings_print_as_plain_messages(monkeypatch, capsys) -> None:
    import argparse
    import warnings

    class DemoWarning(envlink.EnvlinkWarning):
        pass

    def handler(args: argparse.Namespace) -> int:
        warnings.warn("3 rows were dropped", DemoWarning, stacklevel=2)
        return 0

    parser = cli.build_parser()
    monkeypatch.setattr(cli, "build_parser", lambda command=None: parser)
    sites = parser._subparsers._group_actions[0].choices["sites"]  # type: ignore[union-attr]
    sites.set_defaults(handler=handler)
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        code = cli.main(["sites", "t.csv", "-o", "o.csv", "--coords", "c"])
    assert code == 0
    err = capsys.readouterr().err
    assert "envlink sites: warning: 3 rows were dropped" in err
    assert "warnings.warn" not in err


def test_dir_lists_only_the_api() -> None:
    # what a user sees with dir(envlink) or tab completion is the public API, nothing else
    code = "import envlink; print(' '.join(dir(envlink)))"
    names = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           check=True).stdout.split()
    assert names == sorted(envlink.__all__)
    assert not {"Any", "importlib", "annotations", "errors", "_LAZY"} & set(names)
