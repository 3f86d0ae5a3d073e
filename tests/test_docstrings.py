"""Every docstring example in the package runs (doctest), so documented usage stays true."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import envlink


def _modules() -> list[str]:
    names = ["envlink"]
    for info in pkgutil.walk_packages(envlink.__path__, prefix="envlink."):
        if ".commands." in info.name or info.name.endswith("__main__"):
            continue
        names.append(info.name)
    return sorted(names)


@pytest.mark.parametrize("name", _modules())
def test_docstring_examples_run(name: str) -> None:
    module = importlib.import_module(name)
    result = doctest.testmod(
        module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False
    )
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
