"""A plain install carries every package and needs no optional extra for `envlink demo`.

The fresh-environment run (`pip install .` then `envlink demo`, no extras) is too slow
for the test run; tests/test_demo.py runs the demo with pyarrow made unimportable
instead. This checks what such an install is built from: pyproject.toml's package
list and extras (read with the standard library's tomllib).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))


def test_every_package_of_the_source_tree_is_installed() -> None:
    on_disk = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "envlink").rglob("__init__.py")}
    listed = set(PROJECT["tool"]["setuptools"]["packages"])
    assert on_disk <= listed, on_disk - listed


def test_the_plain_install_has_what_the_demo_needs_and_no_tools() -> None:
    needs = " ".join(PROJECT["project"]["dependencies"])
    for library in ("pyogrio", "shapely", "netCDF4", "matplotlib", "geopandas"):
        assert library in needs, library
    for tool in ("pyarrow", "openpyxl", "pytest", "ruff", "mypy"):
        assert tool not in needs, tool
    extras = PROJECT["project"]["optional-dependencies"]
    assert not any(t.startswith(("ruff", "mypy")) for t in extras["test"])  # the linters are their own extra
    assert {"test", "lint", "export"} <= {e for spec in extras["all"] for e in spec.split("[")[1].rstrip("]").split(",")}


def test_readme_installs_the_user_extras_first_and_the_test_extras_for_the_tests() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert 'pip install -e ".[export]" && envlink demo --out envlink-out' in readme
    assert 'pip install -e ".[all]" && python -m pytest -n 2 -q' in readme
