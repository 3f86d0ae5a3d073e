"""Shared pytest fixtures and marker handling for the envlink test suite."""

from __future__ import annotations

import importlib.util
import shutil

import pytest


def _have(module: str) -> bool:
    return importlib.util.find_spec(module) is not None


_REQUIREMENTS = {
    "requires_dask": lambda: _have("dask"),
    "requires_geotiff": lambda: _have("rioxarray") and _have("rasterio"),
    "requires_pyarrow": lambda: _have("pyarrow"),
    "requires_chromium": lambda: shutil.which("chromium") is not None,
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
