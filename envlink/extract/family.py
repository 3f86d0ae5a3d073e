"""Families of candidate windows for a window scan: anchors, lags × spans × statistics, extraction.

A family is every window ``(anchor, lag L, span S)`` crossed with every statistic:
the window is the ``S`` units (days, or whole calendar months) that **end** ``L``
units before the anchor day, the anchor day's own unit included when ``L = 0``:

- unit ``D``: ``[a − L − S + 1, a − L]`` in days;
- unit ``M``: the ``S`` calendar months ending with the month ``L`` months before the
  anchor's month (whole months, first to last day).

The anchor day of a row is taken from its period by a rule of :data:`ANCHORS`
(``start``, ``end``, ``mid``: the middle day, rounded down). Window dates are
inclusive ISO dates in the proleptic Gregorian calendar; ``attach`` maps them to the
grid's calendar as it does every period.

:func:`extract_family` computes every candidate column of a family for a located
table: one :func:`envlink.extract.attach.attach_many` call per window (its
statistics together), every call sharing one
:class:`~envlink.extract.series.CellSeries`, so each cell's series is read once for
the whole family (from the cell-series store when ``cache_dir`` is given).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from envlink.core.registry import Entry, Registry
from envlink.errors import InputError, param_error
from envlink.extract.statistics import STATISTICS

__all__ = ["ANCHORS", "WindowFamily", "family_windows", "extract_family", "read_steps"]

CALLER = "scan"

#: the day each row's windows are anchored to
ANCHORS: Registry[Any] = Registry("window anchor", param="anchors", caller=CALLER)
ANCHORS.add(Entry("start", "the first day of the period (windows before sampling began)",
                  info={"words": "period start"}))
ANCHORS.add(Entry("end", "the last day of the period (windows up to the end of sampling)",
                  info={"words": "period end"}))
ANCHORS.add(Entry("mid", "the middle day of the period, rounded down", aliases=("middle",),
                  info={"words": "period midpoint"}))

_RANGE = re.compile(r"^\s*(\d+)\s*\.\.\s*(\d+)\s*(?::\s*(\d+))?\s*$")


def read_steps(value: Any, name: str, *, low: int) -> tuple[int, ...]:
    """Whole numbers from ``"A..B"``, ``"A..B:STEP"``, ``"1,2,6"``, an int or a list.

    Examples
    --------
    >>> read_steps("0..6:3", "lags", low=0), read_steps("1, 2, 12", "spans", low=1)
    ((0, 3, 6), (1, 2, 12))
    """
    out: list[int]
    if isinstance(value, int | np.integer) and not isinstance(value, bool):
        out = [int(value)]
    elif isinstance(value, str) and (m := _RANGE.match(value)):
        a, b, step = int(m.group(1)), int(m.group(2)), int(m.group(3) or 1)
        out = list(range(a, b + 1, step)) if step > 0 and b >= a else []
    elif isinstance(value, str):
        try:
            out = [int(t) for t in value.split(",")]
        except ValueError:
            out = []
    elif isinstance(value, list | tuple | range) and all(
            isinstance(v, int | np.integer) and not isinstance(v, bool) for v in value):
        out = [int(v) for v in value]
    else:
        out = []
    if not out or min(out) < low:
        raise param_error(name, CALLER, f"whole numbers >= {low}: 'A..B' with A <= B, 'A..B:STEP' "
                          "with STEP >= 1, '1,2,6' or a list", value)
    return tuple(dict.fromkeys(out))


@dataclass(frozen=True)
class WindowFamily:
    """Lags × spans × anchors × statistics, in one unit (``"D"`` days or ``"M"`` months).

    Examples
    --------
    >>> f = WindowFamily.make(lags="0..2", spans="1..2", unit="m", stats=["mean", "max"])
    >>> len(f), f.describe().iloc[0].to_dict()
    (12, {'stat': 'mean', 'anchor': 'start', 'lag': 0, 'span': 1, 'unit': 'M'})
    """

    lags: tuple[int, ...]
    spans: tuple[int, ...]
    unit: str
    anchors: tuple[str, ...]
    stats: tuple[str, ...]

    @classmethod
    def make(cls, *, lags: Any = "0..0", spans: Any = "1..1", unit: str = "D",
             anchors: Any = ("start",), stats: Any = ("mean",)) -> WindowFamily:
        """A family from any accepted spelling (names read through the registries)."""
        u = str(unit).strip().upper()[:1] if isinstance(unit, str) else ""
        if u not in ("D", "M") or str(unit).strip().lower() not in ("d", "m", "day", "days",
                                                                    "month", "months"):
            raise param_error("unit", CALLER, "'D' (days) or 'M' (whole months)", unit)
        anchors = [anchors] if isinstance(anchors, str) else list(anchors)
        stats = [stats] if isinstance(stats, str) else list(stats)
        if not anchors or not stats:
            raise InputError("A window family needs at least one anchor and one statistic.")
        return cls(read_steps(lags, "lags", low=0), read_steps(spans, "spans", low=1), u,
                   tuple(dict.fromkeys(ANCHORS.parse(a).label() for a in anchors)),
                   tuple(dict.fromkeys(STATISTICS.parse(s).label() for s in stats)))

    def __len__(self) -> int:
        return len(self.lags) * len(self.spans) * len(self.anchors) * len(self.stats)

    def describe(self) -> pd.DataFrame:
        """One row per window: ``stat``, ``anchor``, ``lag``, ``span``, ``unit``; index = name."""
        rows = [(s, a, lag, span) for s in self.stats for a in self.anchors for lag in self.lags
                for span in self.spans]
        out = pd.DataFrame(rows, columns=["stat", "anchor", "lag", "span"])
        out["unit"] = self.unit
        out.index = [f"{s}@{a}-lag{lag}{self.unit}-span{span}{self.unit}"
                     for s, a, lag, span in rows]
        return out


def _anchor_days(start: pd.Series, end: pd.Series, anchor: str) -> np.ndarray:
    s = pd.to_datetime(start, format="%Y-%m-%d", errors="coerce").to_numpy("datetime64[D]")
    e = pd.to_datetime(end, format="%Y-%m-%d", errors="coerce").to_numpy("datetime64[D]")
    if anchor == "start":
        return s
    if anchor == "end":
        return e
    return s + (e - s) // 2


def family_windows(table: pd.DataFrame, anchor: str, lag: int, span: int,
                   unit: str) -> tuple[pd.Series, pd.Series]:
    """Each row's window as inclusive ISO dates (missing where the period is missing).

    Examples
    --------
    >>> t = pd.DataFrame({"period_start": ["2004-03-10"], "period_end": ["2004-03-20"]})
    >>> [x.iloc[0] for x in family_windows(t, "start", 2, 3, "D")]
    ['2004-03-06', '2004-03-08']
    >>> [x.iloc[0] for x in family_windows(t, "end", 1, 2, "M")]
    ['2004-01-01', '2004-02-29']
    """
    a = _anchor_days(table["period_start"].astype("string"), table["period_end"].astype("string"),
                     ANCHORS.parse(anchor).name)
    if unit == "D":
        last = a - np.timedelta64(lag, "D")
        first = last - np.timedelta64(span - 1, "D")
    else:
        month = a.astype("datetime64[M]") - np.timedelta64(lag, "M")
        first = (month - np.timedelta64(span - 1, "M")).astype("datetime64[D]")
        last = (month + np.timedelta64(1, "M")).astype("datetime64[D]") - np.timedelta64(1, "D")
    text = [pd.Series(np.asarray(x, dtype="datetime64[D]").astype(str), index=table.index)
            for x in (first, last)]
    ok = ~np.isnat(a)
    return text[0].where(ok), text[1].where(ok)


def extract_family(table: pd.DataFrame, grid: Any, family: WindowFamily, *,
                   progress: bool | None = None, client: Any = None,
                   **attach_options: Any) -> pd.DataFrame:
    """Every candidate column of ``family`` for a located table: one column per window.

    Each cell's series is read once for the whole family: every window's call of
    :func:`~envlink.extract.attach.attach_many` (the window's statistics together)
    shares one :class:`~envlink.extract.series.CellSeries`.

    Parameters
    ----------
    table : pandas.DataFrame
        Rows with the locate stage's columns (``site_lat``, ``site_lon``,
        ``period_start``, ``period_end``; optional ``locate_status``, ``site_wkt``).
    grid : xarray.DataArray
        A normalised grid (:func:`envlink.open_grid`).
    family : WindowFamily
    progress : bool, optional
    client : dask.distributed.Client or str, optional
        Read the cells on this Dask cluster (a client or a scheduler's address), as
        ``client=`` of :func:`envlink.extract.attach.attach`.
    **attach_options
        ``spatial``, ``baseline``, ``mmm``, ``time_weights``, ``min_coverage``,
        ``threshold`` and ``cache_dir`` (the series are then read from and kept in
        the cell-series store) as for :func:`envlink.extract.attach.attach`.

    Returns
    -------
    pandas.DataFrame
        One float64 column per window (named as in :meth:`WindowFamily.describe`),
        one row per input row, in order; a window without a value (a flag of
        ``attach``) is missing.

    Examples
    --------
    >>> from envlink.testing import make_grid
    >>> g = make_grid(np.arange(12.0).reshape(3, 2, 2), lat=[0.5, 1.5], lon=[0.5, 1.5])
    >>> t = pd.DataFrame({"site_lat": [0.5], "site_lon": [0.5],
    ...                   "period_start": ["2000-03-10"], "period_end": ["2000-03-20"]})
    >>> f = WindowFamily.make(lags="0..1", spans=1, unit="M", stats=["mean", "max"])
    >>> extract_family(t, g, f).iloc[0].tolist()
    [8.0, 4.0, 8.0, 4.0]
    """
    from envlink.extract.cluster_read import cluster_client

    cache_dir = attach_options.pop("cache_dir", None)
    with cluster_client(client) as opened:
        return _extract(table, grid, family, progress, cache_dir, opened, attach_options)


def _extract(table: pd.DataFrame, grid: Any, family: WindowFamily, progress: bool | None,
             cache_dir: str | None, client: Any, attach_options: dict[str, Any]) -> pd.DataFrame:
    """:func:`extract_family` with its cluster's client (or None) open."""
    from envlink.core.progress import progress_bar
    from envlink.extract.attach import attach_many
    from envlink.extract.series import CellSeries

    # one read of each cell for every window
    cells = CellSeries.for_grid(grid, cache_dir, show=False, client=client)
    desc = family.describe()
    base = pd.DataFrame({c: table[c] for c in ("site_lat", "site_lon", "locate_status", "site_wkt")
                         if c in table.columns}, index=table.index)
    out: dict[str, np.ndarray] = {}
    with progress_bar(len(desc), "scan windows", "window", show=progress) as bar:
        for (anchor, lag, span), rows in desc.groupby(["anchor", "lag", "span"], sort=False):
            first, last = family_windows(table, anchor, int(lag), int(span), family.unit)
            sub = base.assign(period_start=first, period_end=last)
            covs = [{"name": f"value{k}", "stat": stat} for k, stat in enumerate(rows["stat"])]
            got = attach_many(sub, grid, covs, window="period", progress=False, series=cells,
                              **attach_options)
            for k, name in enumerate(rows.index):
                out[str(name)] = got[f"value{k}"].to_numpy(dtype=np.float64)
            bar.update(len(covs))
    cells.flush()  # the series read from the grid, kept in the store (none without one)
    return pd.DataFrame({name: out[name] for name in desc.index}, index=table.index)
