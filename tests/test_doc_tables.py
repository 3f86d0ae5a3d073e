"""The docs' vocabulary tables are generated from the registries (one home for every name).

A block in ``docs/*.md`` between ``<!-- registry: KEY -->`` and ``<!-- /registry -->``
must equal ``REGISTRY.doc_table()`` of the registry that :data:`REGISTRIES` names for
KEY. Rewrite every block after changing a registry with::

    python tests/test_doc_tables.py --update
"""

from __future__ import annotations

import ast
import importlib
import re
import sys
from pathlib import Path

import pytest

DOCS = Path(__file__).resolve().parents[1] / "docs"
#: marker key -> "module:attribute" of the registry
REGISTRIES: dict[str, str] = {
    "effect-kinds": "envlink.effects.kinds:EFFECT_KINDS",
    "zero-cell-rules": "envlink.effects.core:ZERO_CELL_RULES",
    "export-formats": "envlink.export.formats:EXPORT_FORMATS",
    "spatial-rules": "envlink.extract.rules:SPATIAL_RULES",
    "statistics": "envlink.extract.statistics:STATISTICS",
    "windows": "envlink.extract.windows:WINDOWS",
    "time-weights": "envlink.extract.windows:TIME_WEIGHTS",
    "tau2-estimators": "envlink.metareg.vocabulary:ESTIMATORS",
    "tests": "envlink.metareg.vocabulary:TESTS",
    "prediction-intervals": "envlink.metareg.vocabulary:PREDICTION_INTERVALS",
    "forest-orders": "envlink.report.vocabulary:FOREST_ORDERS",
    "permutation-schemes": "envlink.metareg.shuffles:PERMUTATION_SCHEMES",
    "spatial-weights": "envlink.metareg.spatial_weights:SPATIAL_WEIGHTS",
    "window-anchors": "envlink.extract.family:ANCHORS",
}
_BLOCK = re.compile(r"(<!-- registry: ([a-z0-9-]+) -->\n)(.*?)(<!-- /registry -->)", re.DOTALL)


def _table(key: str) -> str:
    module, _, attr = REGISTRIES[key].partition(":")
    return getattr(importlib.import_module(module), attr).doc_table()


def _blocks() -> list[tuple[Path, str, str]]:
    found = []
    for path in sorted(DOCS.glob("*.md")):
        for m in _BLOCK.finditer(path.read_text(encoding="utf-8")):
            found.append((path, m.group(2), m.group(3)))
    return found


def test_every_marker_names_a_registry() -> None:
    unknown = [(p.name, key) for p, key, _ in _blocks() if key not in REGISTRIES]
    assert unknown == []


@pytest.mark.parametrize("key", sorted(REGISTRIES))
def test_registry_table_in_docs(key: str) -> None:
    blocks = [(p, body) for p, k, body in _blocks() if k == key]
    assert blocks, f"no <!-- registry: {key} --> block in docs/"
    for path, body in blocks:
        assert body.strip() == _table(key).strip(), f"{path.name}: run python tests/test_doc_tables.py --update"


def _registries_in_source() -> set[str]:
    """``module:attribute`` of every module-level ``NAME = Registry(...)`` in envlink."""
    package = DOCS.parent / "envlink"
    found = set()
    for path in sorted(package.rglob("*.py")):
        parts = list(path.relative_to(package.parent).with_suffix("").parts)
        module = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            value = node.value if isinstance(node, (ast.Assign, ast.AnnAssign)) else None
            if isinstance(value, ast.Call) and isinstance(value.func, ast.Name) and value.func.id == "Registry":
                targets = node.targets if isinstance(node, ast.Assign) else [node.target]
                found.update(f"{module}:{t.id}" for t in targets if isinstance(t, ast.Name))
    return found


def test_every_registry_has_a_docs_table() -> None:
    assert _registries_in_source() == set(REGISTRIES.values())


def test_the_architecture_page_names_every_registry() -> None:
    # docs/architecture.md, "Every registry": the name and its owning module's file
    text = (DOCS / "architecture.md").read_text(encoding="utf-8")
    rows = [line for line in text.splitlines() if line.startswith("| ")]
    for ref in REGISTRIES.values():
        module, _, attr = ref.partition(":")
        path = module.replace(".", "/")
        path = f"{path}/__init__.py" if (DOCS.parent / path).is_dir() else f"{path}.py"
        assert any(f"`{attr}` in {path}" in row for row in rows), ref


def _update() -> None:
    for path in sorted(DOCS.glob("*.md")):
        text = path.read_text(encoding="utf-8")
        new = _BLOCK.sub(lambda m: m.group(1) + _table(m.group(2)) + "\n" + m.group(4), text)
        if new != text:
            path.write_text(new, encoding="utf-8")
            print(f"updated {path}")


if __name__ == "__main__":
    if sys.argv[1:] == ["--update"]:
        _update()
    else:
        print(__doc__)
