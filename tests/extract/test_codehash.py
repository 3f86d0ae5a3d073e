"""The code hash covers every module of an import graph; the store's key holds the hash of the
code that turns files into series (the grid reading, the cell reader, the store itself: a grid
opened from a file is keyed by the file, not by its decoded values)."""

from __future__ import annotations

import shutil
from pathlib import Path

from envlink.extract import store
from envlink.extract.codehash import decoding_files, dependency_files, package_root, source_hash


def _names(files: list[Path], root: Path) -> set[str]:
    return {f.relative_to(root).as_posix() for f in files}


def test_the_set_follows_imports_inside_functions_and_packages() -> None:
    root = package_root()
    names = _names(dependency_files(), root)
    rules = {p.relative_to(root).as_posix() for p in (root / "envlink/extract/rules").glob("*.py")}
    assert rules and rules <= names
    expected = {
        "envlink/extract/attach.py", "envlink/extract/series.py", "envlink/extract/store.py",
        "envlink/extract/compute.py", "envlink/extract/reader.py", "envlink/extract/statistics.py",
        "envlink/extract/windows.py", "envlink/extract/calendars.py", "envlink/geo.py",
        "envlink/core/flags.py", "envlink/core/registry.py", "envlink/core/earth.py",
        "envlink/core/calendars.py", "envlink/core/progress.py", "envlink/errors.py",
        "envlink/__init__.py", "envlink/extract/__init__.py",
        # the grid reading: a lazy grid's values come from its decoding when cells are read
        "envlink/grids/open.py", "envlink/grids/decode.py", "envlink/grids/conventions.py",
        "envlink/grids/units.py", "envlink/grids/timeaxis.py",
    }  # fmt: skip
    assert expected <= names, expected - names
    # stages the extraction never imports stay out
    assert not any(n.startswith(("envlink/metareg/", "envlink/report/", "envlink/project/")) for n in names)


def _copy(tmp_path: Path) -> Path:
    root = tmp_path / "src"
    shutil.copytree(package_root() / "envlink", root / "envlink",
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    return root


def test_an_edit_to_any_dependency_changes_the_hash(tmp_path: Path) -> None:
    root = _copy(tmp_path)
    files = dependency_files(root=root)
    assert _names(files, root) == _names(dependency_files(), package_root())
    before = source_hash(files, root)
    assert before == source_hash(dependency_files())  # the copy hashes as the installed package does
    for rel in ("envlink/core/flags.py", "envlink/extract/rules/buffer.py", "envlink/geo.py",
                "envlink/grids/conventions.py"):
        path = root / rel
        text = path.read_text(encoding="utf-8")
        path.write_text(text + "\n# an edit\n", encoding="utf-8")
        assert source_hash(dependency_files(root=root), root) != before, rel
        path.write_text(text, encoding="utf-8")
    assert source_hash(dependency_files(root=root), root) == before


def test_a_new_lazy_import_brings_its_module_in(tmp_path: Path) -> None:
    root = _copy(tmp_path)
    assert "envlink/metareg/model.py" not in _names(dependency_files(root=root), root)
    rule = root / "envlink/extract/rules/nearest.py"
    rule.write_text(rule.read_text(encoding="utf-8") + (
        "\n\ndef _later() -> None:\n    from envlink.metareg import model  # noqa: F401\n"
    ), encoding="utf-8")
    assert "envlink/metareg/model.py" in _names(dependency_files(root=root), root)


def test_the_store_key_holds_the_decoding_code() -> None:
    # the grids' decoding modules and the reader, not the statistics nor locate: a new
    # statistic keeps the stored series, a change to how files are decoded does not
    root = package_root()
    names = _names(store.decoding_files(), root)
    assert {"envlink/grids/open.py", "envlink/grids/decode.py", "envlink/extract/reader.py",
            "envlink/grids/units.py"} <= names
    assert not any(n.startswith(("envlink/extract/stat", "envlink/locate/")) for n in names)
    assert store.decoding_code_hash() == source_hash(store.decoding_files())
    # the store's own modules: how series are gathered, written and read back
    assert {"envlink/extract/series.py", "envlink/extract/store.py", "envlink/extract/storefiles.py",
            "envlink/extract/segments.py"} <= names


def test_an_edit_to_the_decoding_code_changes_the_store_key(tmp_path: Path) -> None:
    root = _copy(tmp_path)
    before = source_hash(decoding_files(root), root)
    assert before == store.decoding_code_hash()  # the copy hashes as the installed package does
    for rel in ("envlink/grids/conventions.py", "envlink/extract/segments.py", "envlink/core/util.py"):
        path = root / rel
        text = path.read_text(encoding="utf-8")
        path.write_text(text + "\n# an edit\n", encoding="utf-8")
        assert source_hash(decoding_files(root), root) != before, rel
        path.write_text(text, encoding="utf-8")
    statistics = root / "envlink/extract/statistics.py"  # a statistic does not change stored series
    statistics.write_text(statistics.read_text(encoding="utf-8") + "\n# an edit\n", encoding="utf-8")
    assert source_hash(decoding_files(root), root) == before
