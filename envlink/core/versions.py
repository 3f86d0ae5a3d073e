"""Versions of envlink, Python and the libraries that shape envlink's results, for provenance.

:data:`VERSION` is envlink's own version, written once: ``envlink.__version__``,
``envlink --version``, the provenance of every output, the report and the extraction
cache's keys read it, and ``pyproject.toml`` takes the package's version from it.
"""

from __future__ import annotations

import contextlib
import functools
import platform

__all__ = ["VERSION", "software_versions", "LIBRARIES"]

#: envlink's version (the one place it is written).
VERSION = "0.1.0"

#: Distributions whose versions provenance records (when installed), besides envlink's own.
LIBRARIES = ("numpy", "pandas", "scipy", "xarray", "netCDF4", "cftime", "pyproj",
             "shapely", "geopandas", "pyarrow")


@functools.cache
def _versions() -> tuple[tuple[str, str], ...]:
    from importlib import metadata

    out = [("python", platform.python_version()), ("envlink", VERSION)]
    for dist in LIBRARIES:
        with contextlib.suppress(metadata.PackageNotFoundError):
            out.append((dist, metadata.version(dist)))
    return tuple(out)


def software_versions() -> dict[str, str]:
    """Versions of Python, envlink and the libraries that shape the results (read once).

    Examples
    --------
    >>> v = software_versions()
    >>> "python" in v, v["envlink"] == VERSION
    (True, True)
    """
    return dict(_versions())
