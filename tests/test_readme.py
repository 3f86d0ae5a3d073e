"""The README stays true: its Python example runs and its commands exist."""

from __future__ import annotations

import re
import runpy
import warnings
from pathlib import Path

import pytest

from envlink import cli

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_python_example_runs(monkeypatch: pytest.MonkeyPatch, tmp_path: Path,
                             capsys: pytest.CaptureFixture[str]) -> None:
    block = re.search(r"```python\n(.*?)```", README, flags=re.S)
    assert block, "README has no Python example"
    script = tmp_path / "readme_example.py"
    script.write_text(block.group(1), encoding="utf-8")
    monkeypatch.chdir(ROOT)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the example's dropped-row notes are expected
        runpy.run_path(str(script), run_name="__main__")
    out = capsys.readouterr().out
    assert "sst_anom" in out and "Knapp-Hartung" in out


def test_commands_in_readme_exist() -> None:
    blocks = "\n".join(re.findall(r"```(?:bash)?\n(.*?)```", README, flags=re.S))
    used = set(re.findall(r"(?:^|&& )\s*(?:\$ )?envlink (\w+)", blocks, flags=re.M))
    assert used, "README shows no envlink command"
    assert used <= set(cli.COMMANDS), used - set(cli.COMMANDS)


def test_test_command_matches_ci() -> None:
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert "python -m pytest -n 2 -q" in README
    assert "\npython -m pytest -n 2 -q\n" in ci


def _command_lines(text: str) -> list[list[str]]:
    """Every ``envlink ...`` command of the code blocks, continuation lines joined."""
    import shlex

    blocks = "\n".join(re.findall(r"```(?:bash)?\n(.*?)```", text, flags=re.S))
    joined = re.sub(r"\\\n\s*", " ", blocks)
    lines = []
    for line in joined.splitlines():
        for part in line.split("&&"):
            words = shlex.split(part.strip().removeprefix("$ "))
            if words[:1] == ["envlink"] and not words[1].endswith(":"):  # not a message shown
                lines.append(words[1:])
    return lines


@pytest.mark.parametrize("doc", ["README.md", "docs/tutorial.md"])
def test_commands_in_the_docs_parse(doc: str) -> None:
    # every command line shown is accepted by the parser: options exist, choices are valid
    parser = cli.build_parser()
    lines = _command_lines((ROOT / doc).read_text(encoding="utf-8"))
    assert lines
    for argv in lines:
        try:
            parser.parse_args(argv)
        except SystemExit as exc:  # pragma: no cover - the message says which line
            raise AssertionError(f"{doc}: envlink {' '.join(argv)} does not parse") from exc
