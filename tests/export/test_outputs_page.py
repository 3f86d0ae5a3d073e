"""docs/outputs.md stays true: its Python example runs and prints what the page says, and the
files, layers, sheets and resource names its R, QGIS and DuckDB snippets use exist.

The readers are the ones the page shows: pyarrow, pyogrio and openpyxl (the Parquet,
OGC GeoPackage and Office Open XML readers); the demo's export name comes from
demo_grids/demo.toml.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import tomllib
from pathlib import Path

import pytest
from envlink.demo_grids import data_path

DOC = Path(__file__).parents[2] / "docs" / "outputs.md"
TEXT = DOC.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def example() -> tuple[dict[str, object], str]:
    pytest.importorskip("pyarrow")
    pytest.importorskip("openpyxl")
    block = re.findall(r"```python\n(.*?)```", TEXT, flags=re.S)
    assert len(block) == 1
    namespace: dict[str, object] = {}
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(compile(block[0], str(DOC), "exec"), namespace)  # noqa: S102 - the page's own code
    return namespace, printed.getvalue()


def test_the_python_example_prints_what_the_page_says(example: tuple[dict[str, object], str]) -> None:
    _, printed = example
    lines = printed.splitlines()
    assert lines[0] == "int64 string date32[day]" and "`int64 string date32[day]`" in TEXT
    assert lines[1] == "[['vell_enriched', 'Point'], ['vell_enriched_regions', 'Polygon']]"
    assert f"`{lines[1]}`" in TEXT
    # text, number, text, numbers, an empty cell (no region in row 1), a date, a boolean
    assert lines[2] == "['s', 'n', 's', 'n', 'n', 'n', 'd', 'b']"


def test_the_names_the_snippets_use_exist(example: tuple[dict[str, object], str]) -> None:
    import openpyxl
    import pyogrio

    namespace, _ = example
    paths = namespace["paths"]
    assert isinstance(paths, dict)
    demo = tomllib.loads(data_path("demo.toml").read_text(encoding="utf-8"))
    name = demo["export"]["name"]
    assert name == "vell_enriched" and demo["project"]["out"] == "envlink-demo"
    layers = {str(n) for n, _ in pyogrio.list_layers(paths["gpkg"])}
    assert set(re.findall(r"layer = ['\"](\w+)['\"]", TEXT)) <= layers
    for suffix in re.findall(r"envlink-demo/vell_enriched\.(\w+)", TEXT):
        assert suffix in paths, suffix
    sheets = openpyxl.load_workbook(paths["xlsx"]).sheetnames
    assert sheets == [name, "columns", "provenance"]
    assert all(f"`{s}`" in TEXT for s in ("columns", "provenance"))
    resource = json.loads(paths["datapackage"].read_text())["resources"][0]["name"]
    assert f'read_resource(pkg, "{resource}")' in TEXT
