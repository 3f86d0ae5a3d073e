"""Bundled invented data for the Vell Archipelago demo (installed as ``envlink.demo_grids``).

Everything here is invented: the archipelago, its reefs, the surveys and the grids
were made by the seeded generator :mod:`envlink.demo_grids.generate`, which also
plants the relation that the demo's meta-regression recovers (see ``README.md``).

Files: ``vell_sst_monthly.nc``, ``vell_sst_daily.nc``, ``vell_air_monthly.nc``,
``vell_studies.csv``, ``vell_reefs.gpkg``, ``vell_reefs.csv``, ``vell_truth.json`` (what
the generator knows: planted values, true windows and anomalies) and ``demo.toml``.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["data_path", "DEMO_FILES"]

#: Every file the demo needs, as the generator writes them.
DEMO_FILES = (
    "vell_sst_monthly.nc",
    "vell_sst_daily.nc",
    "vell_air_monthly.nc",
    "vell_studies.csv",
    "vell_reefs.gpkg",
    "vell_reefs.csv",
    "vell_truth.json",
    "demo.toml",
)


def data_path(name: str) -> Path:
    """Return the path of a bundled demo file.

    Parameters
    ----------
    name : str
        One of :data:`DEMO_FILES`.

    Returns
    -------
    pathlib.Path
        Where the file lies in this installation. It may not exist when the data
        files were left out of the install; :func:`envlink.run_demo` then
        regenerates them with the seeded generator.

    Raises
    ------
    KeyError
        ``name`` is not a demo file.

    Examples
    --------
    >>> data_path("demo.toml").name
    'demo.toml'
    """
    if name not in DEMO_FILES:
        raise KeyError(f"{name!r} is not a demo file; expected one of {', '.join(DEMO_FILES)}.")
    return Path(str(resources.files(__name__).joinpath(name)))
