"""``envlink.scan``: a family of windows extracted from a grid, each fitted, with a family-wise p.

The wiring of a window scan: the family (:class:`envlink.extract.family.WindowFamily`:
lags × spans × anchors × statistics) is extracted for every row
(:func:`candidate_columns`: each cell's series read once for every window), then
:func:`envlink.metareg.scan.scan_windows` fits the model once per window and runs
the family-wise permutation test. The command line (``envlink scan``) and the project
file (``[scan]``) call :func:`scan`.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from envlink.extract.family import WindowFamily, extract_family
from envlink.metareg.scan import ScanResult, scan_windows

__all__ = ["scan", "candidate_columns", "ATTACH_OPTIONS"]

#: options passed to the extraction (as ``attach`` takes them)
ATTACH_OPTIONS = ("spatial", "baseline", "mmm", "time_weights", "min_coverage", "threshold", "cache_dir")


def candidate_columns(table: pd.DataFrame, grid: Any, family: WindowFamily, *,
                      progress: bool | None = None, client: Any = None,
                      **attach_options: Any) -> pd.DataFrame:
    """The family's candidate columns for every row (one per window × statistic).

    The one extraction call of the scan (:func:`envlink.extract.family.extract_family`:
    each cell's series read once for the whole family, on ``client``'s Dask cluster when
    given; ``cache_dir`` in ``attach_options`` reads and keeps them in the cell-series store).
    """
    return extract_family(table, grid, family, progress=progress, client=client, **attach_options)


def scan(table: pd.DataFrame, grid: Any, *, effect: str = "effect", variance: str = "variance",
         lags: Any = "0..0", spans: Any = "1..1", unit: str = "D", anchors: Any = ("start",),
         stats: Any = ("mean",), moderators: str | None = None, nested: str | None = None,
         method: str = "REML", test: str = "z", n_permutations: int = 1000,
         seed: int | None = None, scheme: str | None = None, level: float = 0.95,
         progress: bool | None = None, client: Any = None, **attach_options: Any) -> ScanResult:
    """Scan a family of covariate windows as moderators, with a family-wise permutation p.

    Each window is the ``span`` units (days ``"D"`` or whole months ``"M"``) ending
    ``lag`` units before the anchor day of each row's period (docs/inference.md).

    Parameters
    ----------
    table : pandas.DataFrame
        A located table (``site_lat``, ``site_lon``, ``period_start``, ``period_end``)
        with the effect, variance, fixed moderators and the ``nested`` column.
    grid : xarray.DataArray
        A normalised grid (:func:`envlink.open_grid`).
    effect, variance : str
    lags, spans : str, int or list of int
        ``"0..12"``, ``"0..90:7"`` (step 7), ``"1,3,6"`` or a list.
    unit : {"D", "M"}
    anchors : str or list of str
        Names of :data:`envlink.extract.family.ANCHORS` (``start``, ``end``, ``mid``).
    stats : str or list of str
        Statistics of :data:`envlink.extract.statistics.STATISTICS`.
    moderators, nested, method, test, level
        The model fitted to every window (see :func:`envlink.metareg.scan.scan_windows`).
    n_permutations, seed, scheme
        The family-wise permutation test.
    progress : bool, optional
    client : dask.distributed.Client or str, optional
        Read the grid's cells on this Dask cluster (a client or a scheduler's address),
        as ``client=`` of :func:`envlink.attach`; the fits run here.
    **attach_options
        ``spatial``, ``baseline``, ``mmm``, ``time_weights``, ``min_coverage``,
        ``threshold`` and ``cache_dir`` (the cell-series store's folder) as for
        :func:`envlink.attach`.

    Returns
    -------
    ScanResult

    Examples
    --------
    >>> import numpy as np
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(48.0).reshape(12, 2, 2) % 7, lat=[0.5, 1.5], lon=[0.5, 1.5],
    ...               start="2000-01-01", freq="MS")
    >>> t = pd.DataFrame({"site_lat": [0.5, 1.5] * 5, "site_lon": [0.5] * 10,
    ...                   "period_start": [f"2000-{m:02d}-01" for m in range(3, 13)],
    ...                   "period_end": [f"2000-{m:02d}-28" for m in range(3, 13)],
    ...                   "effect": np.linspace(0, 1, 10), "variance": [0.05] * 10})
    >>> r = scan(t, g, lags="0..1", spans="1..2", unit="M", n_permutations=99, seed=1)
    >>> r.n_windows, r.heatmap("statistic").shape
    (4, (2, 2))
    """
    family = WindowFamily.make(lags=lags, spans=spans, unit=unit, anchors=anchors, stats=stats)
    candidates = candidate_columns(table, grid, family, progress=progress, client=client,
                                   **attach_options)
    return scan_windows(table, candidates, windows=family.describe(), effect=effect,
                        variance=variance, moderators=moderators, nested=nested, method=method,
                        test=test, n_permutations=n_permutations, seed=seed, scheme=scheme,
                        level=level, progress=progress)
