"""Shared pytest fixtures and marker handling for the envlink test suite."""

from __future__ import annotations

import importlib.util
import os
import shutil
import tempfile
from pathlib import Path

import pytest


def _have(module: str) -> bool:
    return importlib.util.find_spec(module) is not None


_REQUIREMENTS = {
    "requires_dask": lambda: _have("dask"),
    "requires_geotiff": lambda: _have("rioxarray") and _have("rasterio"),
    "requires_pyarrow": lambda: _have("pyarrow"),
    "requires_numba": lambda: _have("numba"),
    "requires_duckdb": lambda: _have("duckdb"),
    "requires_chromium": lambda: shutil.which("chromium") is not None,
    "requires_remote": lambda: _have("fsspec") and _have("requests"),
}


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    for item in items:
        for marker, available in _REQUIREMENTS.items():
            if item.get_closest_marker(marker) and not available():
                item.add_marker(pytest.mark.skip(reason=f"{marker}: dependency not installed"))


# Keep hypothesis from writing its example database into the checkout.
try:
    import tempfile as _tempfile

    from hypothesis import settings as _hyp_settings
    from hypothesis.configuration import set_hypothesis_home_dir

    set_hypothesis_home_dir(_tempfile.mkdtemp(prefix="envlink-hypothesis-"))

    _hyp_settings.register_profile("envlink", database=None)
    _hyp_settings.load_profile("envlink")
except ImportError:  # pragma: no cover - hypothesis is a test extra
    pass


# envlink's cache folder (the cell-series store, numba's compiled kernels) is a fresh
# folder per test session, never the user's: runs see an empty store. Compiled
# kernels are kept between sessions in a folder of the test user's own (a link).
def _test_cache() -> str:
    root = Path(tempfile.mkdtemp(prefix="envlink-test-cache-"))
    kernels = Path(tempfile.gettempdir()) / f"envlink-test-numba-{os.getuid() if hasattr(os, 'getuid') else 0}"
    try:
        kernels.mkdir(exist_ok=True)
        (root / "numba").symlink_to(kernels, target_is_directory=True)
    except OSError:  # no links here: the kernels compile once per session
        pass
    return str(root)


if "ENVLINK_TEST_CACHE" not in os.environ:  # set once, by the first process (xdist workers inherit it)
    os.environ["ENVLINK_TEST_CACHE"] = os.environ["ENVLINK_CACHE"] = _test_cache()
