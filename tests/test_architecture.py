"""The package's shape: one-way imports without cycles, layers, module docstrings, sizes, cited files.

The import graph is built from the source (every ``import`` statement, at module
level or inside a function, plus ``importlib.import_module("...")`` with a literal
name), so lazy imports count too; imports under ``if TYPE_CHECKING:`` never run and
do not. ``from envlink.x import y`` is an edge to the module ``envlink.x.y`` when
``y`` is a submodule, else to ``envlink.x``; importing ``envlink.x.y`` does not count
as importing its parent package ``envlink.x``. The layers are those of
DEVELOPERS.md ("Layout"): errors and core -> pure helpers -> stages -> wiring.
"""

from __future__ import annotations

import ast
import re
from functools import cache
from pathlib import Path

import pytest

import envlink

PACKAGE = Path(envlink.__file__).parent
REPO = PACKAGE.parent

STAGES = frozenset({"locate", "grids", "extract", "effects", "metareg", "export", "report"})
WIRING = frozenset({"project", "cli", "commands", "__main__"})
CORE = frozenset({"errors", "core"})
HELPERS = frozenset({"geo", "tables", "testing"})


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(REPO).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


@cache
def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _imported_names(path: Path, name: str) -> set[str]:
    """Every dotted name ``path`` imports (submodules resolved), outside TYPE_CHECKING blocks."""
    modules = _modules()
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()

    def visit(node: ast.AST) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.If) and _is_type_checking(child):
                for other in child.orelse:
                    visit_node(other)
                continue
            visit_node(child)

    def visit_node(node: ast.AST) -> None:
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                pkg = package
                for _ in range(node.level - 1):
                    pkg = pkg.rpartition(".")[0]
                base = f"{pkg}.{base}" if base else pkg
            for alias in node.names:
                full = f"{base}.{alias.name}"
                found.add(full if full in modules else base)
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr == "import_module" and node.args
              and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str)):
            found.add(node.args[0].value)
        visit(node)

    visit(ast.parse(path.read_text(encoding="utf-8")))
    return found


@cache
def import_graph() -> dict[str, frozenset[str]]:
    """envlink module -> the envlink modules it imports (itself excluded)."""
    modules = _modules()
    graph = {}
    for name, path in modules.items():
        targets = set()
        for target in _imported_names(path, name):
            if not (target == "envlink" or target.startswith("envlink.")):
                continue
            while target not in modules and "." in target:  # a name inside a module
                target = target.rpartition(".")[0]
            if target in modules and target != name:
                targets.add(target)
        graph[name] = frozenset(targets)
    return graph


def import_cycles(graph: dict[str, frozenset[str]]) -> list[list[str]]:
    """One cycle (as a path that returns to its start) per strongly connected component."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    components: list[list[str]] = []

    def connect(v: str) -> None:  # Tarjan's algorithm
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                connect(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1 or v in graph[v]:
                components.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            connect(v)
    return [_cycle_in(graph, comp) for comp in components]


def _cycle_in(graph: dict[str, frozenset[str]], component: list[str]) -> list[str]:
    """A shortest path from the component's first module back to itself, inside the component."""
    members, start = set(component), component[0]
    paths = {start: [start]}
    queue = [start]
    while queue:
        v = queue.pop(0)
        for w in sorted(graph[v] & members):
            if w == start:
                return paths[v] + [start]
            if w not in paths:
                paths[w] = paths[v] + [w]
                queue.append(w)
    return component  # pragma: no cover - a component always holds a cycle


def _show(cycles: list[list[str]]) -> str:
    return "import cycles:\n" + "\n".join("  " + " -> ".join(c) for c in cycles)


def _layer(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "envlink"


def test_graph_sees_lazy_imports_and_resolves_submodules() -> None:
    graph = import_graph()
    # a function-level import (commands run their stage lazily)
    assert "envlink.locate.sites" in graph["envlink.commands.sites"]
    # `from envlink.core.util import atomic_path` is an edge to the module envlink.core.util
    assert "envlink.core.util" in graph["envlink.tables.write"]
    # `from envlink import locate` is an edge to the subpackage, not to the root
    assert "envlink.locate" in graph["envlink"]
    # a made-up cycle is found and printed as a path
    toy = {"a": frozenset({"b"}), "b": frozenset({"c"}), "c": frozenset({"a"}), "d": frozenset({"a"})}
    assert import_cycles(toy) == [["a", "b", "c", "a"]]


def test_no_import_cycles() -> None:
    cycles = import_cycles(import_graph())
    assert not cycles, _show(cycles)


def test_no_private_top_level_modules() -> None:
    private = sorted(
        p.name for p in PACKAGE.iterdir()
        if p.name.startswith("_") and p.name not in ("__init__.py", "__main__.py", "__pycache__")
        and (p.suffix == ".py" or p.is_dir())
    )
    assert not private, f"private top-level modules (move them into the package that uses them): {private}"


def test_layers_import_one_way() -> None:
    allowed = {
        "errors": set(),
        "core": {"errors", "core"},
        **{h: CORE | HELPERS for h in HELPERS},
        **{s: CORE | HELPERS | {s} for s in STAGES},
    }
    wrong = []
    for module, targets in sorted(import_graph().items()):
        layer = _layer(module)
        if layer not in allowed:  # the root namespace and the wiring may import anything
            assert layer in WIRING or layer == "envlink", f"{module}: unknown layer {layer!r}"
            continue
        # (the root namespace is wiring too: envlink's version lives in core/versions.py)
        wrong += [f"{module} -> {t}" for t in sorted(targets) if _layer(t) not in allowed[layer]]
    assert not wrong, "imports against the layers (errors/core -> helpers -> stages -> wiring):\n" + "\n".join(wrong)


def _first_docstring_line(path: Path) -> str:
    doc = ast.get_docstring(ast.parse(path.read_text(encoding="utf-8")), clean=True) or ""
    return doc.strip().splitlines()[0].strip() if doc.strip() else ""


@pytest.mark.parametrize("module", sorted(_modules()))
def test_module_docstring_says_what_it_is_for(module: str) -> None:
    first = _first_docstring_line(_modules()[module])
    assert first, f"{module} has no docstring"
    assert first.endswith((".", ":")), f"{module}: the first docstring line is not a sentence: {first!r}"
    words = re.findall(r"[\w'-]+", first)
    short = module.rpartition(".")[2]
    assert len(words) >= 3 and first.rstrip(".:").strip("` ").lower() not in (module, short), (
        f"{module}: the first docstring line should say what the module is for: {first!r}"
    )


def _code_lines(lines: list[str], node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines of code in a function: its docstring, comments and blank lines not counted."""
    skip: set[int] = set()
    body = node.body
    if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) \
            and isinstance(body[0].value.value, str):
        skip = set(range(body[0].lineno, (body[0].end_lineno or body[0].lineno) + 1))
    count = 0
    for i in range(node.lineno, (node.end_lineno or node.lineno) + 1):
        text = lines[i - 1].strip()
        if i not in skip and text and not text.startswith("#"):
            count += 1
    return count


def test_code_line_counter() -> None:
    src = 'def f(x):\n    """Doc.\n\n    More.\n    """\n    # a comment\n\n    y = x\n    return y\n'
    node = ast.parse(src).body[0]
    assert isinstance(node, ast.FunctionDef)
    assert _code_lines(src.splitlines(), node) == 3  # def, y = x, return


def test_module_and_function_sizes() -> None:
    too_big = []
    for module, path in sorted(_modules().items()):
        text = path.read_text(encoding="utf-8")
        lines = text.splitlines()
        if len(lines) > 450:
            too_big.append(f"{module}: {len(lines)} lines (limit 450)")
        for node in ast.walk(ast.parse(text)):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and (n := _code_lines(lines, node)) > 80:
                too_big.append(f"{module}.{node.name} (line {node.lineno}): {n} lines of code (limit 80)")
    assert not too_big, "\n".join(too_big)


# ---------------------------------------------------------------------------------------
# documentation cites only files that ship with the project
# ---------------------------------------------------------------------------------------

#: Names of files that do not ship (spelled in pieces so this file does not cite them).
UNSHIPPED = [re.compile(p) for p in (r"DESIGN" + r"(\.md|\s*§|\s+card)", r"design" + r" card",
                                     r"STYLE" + r"\.md", r"\.\./" + r"shared")]


def _shipped_text_files() -> list[Path]:
    files = [REPO / "README.md", REPO / "DEVELOPERS.md"]
    for folder, suffixes in (("envlink", (".py",)), ("docs", (".md",)), ("tests", (".py", ".md")),
                             ("demo_grids", (".py", ".md", ".toml"))):
        files += [p for p in sorted((REPO / folder).rglob("*")) if p.suffix in suffixes]
    return [p for p in files if p.is_file()]


def test_only_shipped_files_are_cited() -> None:
    found = []
    for path in _shipped_text_files():
        for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
            if any(p.search(line) for p in UNSHIPPED):
                found.append(f"{path.relative_to(REPO)}:{n}: {line.strip()[:100]}")
    assert not found, "cites a file that does not ship; cite docs/*.md or a module instead:\n" + "\n".join(found)


def test_shared_constants_have_one_home() -> None:
    from envlink import geo
    from envlink.core import calendars, columns, earth
    from envlink.grids import timeaxis
    from envlink.locate import coords, sites

    assert geo.EARTH_RADIUS_KM is earth.EARTH_RADIUS_KM
    assert coords.KM_PER_DEGREE is earth.KM_PER_DEG
    assert timeaxis.CF_CALENDARS is calendars.CF_CALENDARS
    assert timeaxis.STANDARD_CALENDARS is calendars.STANDARD_CALENDARS
    assert sites.OUTPUT_COLUMNS is columns.LOCATE_COLUMNS


def test_the_version_is_written_once(capsys: pytest.CaptureFixture[str]) -> None:
    import tomllib

    from envlink.cli import main
    from envlink.core.versions import VERSION, software_versions

    assert envlink.__version__ is VERSION and software_versions()["envlink"] == VERSION
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"envlink {VERSION}"
    meta = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))
    assert "version" not in meta["project"] and "version" in meta["project"]["dynamic"]
    assert meta["tool"]["setuptools"]["dynamic"]["version"] == {"attr": "envlink.core.versions.VERSION"}
