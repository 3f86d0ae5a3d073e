"""docs/howto-new-grid.md: every Python block on the page runs, in order, in an empty folder."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

DOC = Path(__file__).parents[1] / "docs" / "howto-new-grid.md"


def test_howto_new_grid_blocks_run(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    text = DOC.read_text(encoding="utf-8")
    python = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    toml = re.findall(r"```toml\n(.*?)```", text, flags=re.S)
    assert len(python) == 6 and len(toml) == 1
    monkeypatch.chdir(tmp_path)
    namespace: dict[str, object] = {"TOML_ABOVE": toml[0]}
    for block in python:
        exec(compile(block, str(DOC), "exec"), namespace)  # noqa: S102 - the page's own code
    assert (tmp_path / "out" / "datapackage.json").is_file()
    assert (tmp_path / "out-project" / "enriched.csv").is_file()
