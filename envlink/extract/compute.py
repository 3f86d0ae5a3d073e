"""Computing per-row values from cell series: source blocks, nearest-valid search.

:func:`compute_values` walks the sources in blocks (so memory stays bounded however
many rows there are), builds each block's source series from the cell series, and
applies the statistic to every row of the block at once. :func:`nearest_valid`
implements the ``nearest-valid:Dkm`` rule, where "valid" means having data in the
row's own window with at least the minimum coverage.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator

import numpy as np
import xarray as xr

from envlink.errors import InputError
from envlink.extract.flags import RowFlags
from envlink.extract.options import StatSpec
from envlink.extract.reader import read_cells, read_cells_near_gaps
from envlink.extract.sources import Sources
from envlink.extract.spatial import GridGeometry
from envlink.extract.stats import (
    Spans,
    Steps,
    climatology,
    dhw_series,
    monthly_climatology,
    window_stat,
)
from envlink.geo import EARTH_RADIUS_KM, cell_edges

__all__ = ["compute_values", "nearest_valid", "coverage"]

_BLOCK_ELEMENTS = 2_000_000
_KM_PER_DEG = np.pi * EARTH_RADIUS_KM / 180.0


def _sub(sp: Spans, r: np.ndarray) -> Spans:
    return Spans(sp.i0[r], sp.i1[r], sp.ov0[r], sp.ov1[r], sp.days[r], sp.has[r])


def _blocks(row_src: np.ndarray, nsrc: int, nt: int) -> Iterator[tuple[int, int, np.ndarray]]:
    """Yield (first source, end source, rows) for blocks of sources."""
    per = max(1, _BLOCK_ELEMENTS // max(nt, 1))
    rows = np.nonzero(row_src >= 0)[0]
    order = rows[np.argsort(row_src[rows], kind="stable")]
    srcs = row_src[order]
    for a in range(0, nsrc, per):
        b = min(a + per, nsrc)
        lo, hi = np.searchsorted(srcs, a, "left"), np.searchsorted(srcs, b, "left")
        if hi > lo:
            yield a, b, order[lo:hi]


def coverage(X: np.ndarray, steps: Steps, row_x: np.ndarray, sp: Spans) -> np.ndarray:
    """Fraction of each row's window days with data in cell series ``X[row_x]``."""
    out = np.zeros(row_x.size)
    length = np.asarray(steps.length, dtype=np.float64)
    for a, b, rows in _blocks(row_x, X.shape[0], X.shape[1]):
        valid = np.isfinite(X[a:b])
        s = _sub(sp, rows)
        src = row_x[rows] - a
        # days with data: the cumulative sum of (valid x step length), as _wsum does with
        # q = valid, b = length, but with one float64 temporary instead of three
        cum = np.zeros((b - a, X.shape[1] + 1), dtype=np.float64)
        np.cumsum(np.where(valid, length[None, :], 0.0), axis=1, out=cum[:, 1:])
        i0, i1 = s.i0, s.i1
        inner = np.where(i1 > i0 + 1, cum[src, i1] - cum[src, np.minimum(i0 + 1, i1)], 0.0)
        first = s.ov0 * valid[src, i0]
        last = np.where(i1 > i0, s.ov1 * valid[src, i1], 0.0)
        out[rows] = np.where(s.has, inner + first + last, 0.0) / s.days
    return np.where(sp.has, out, 0.0)


def _source_series(X: np.ndarray, xrow: np.ndarray, srcs: Sources, a: int, b: int) -> np.ndarray:
    p0, p1 = srcs.ptr[a], srcs.ptr[b]
    if srcs.single:
        return X[xrow[p0:p1]].astype(np.float64)
    from scipy import sparse

    used, local = np.unique(xrow[p0:p1], return_inverse=True)
    counts = np.diff(srcs.ptr[a : b + 1])
    rows = np.repeat(np.arange(b - a), counts)
    W = sparse.csr_matrix((srcs.weights[p0:p1], (rows, local.ravel())), shape=(b - a, used.size))
    Xs = X[used].astype(np.float64)
    valid = np.isfinite(Xs)
    num = W @ np.where(valid, Xs, 0.0)
    den = W @ valid.astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def _mmm_from_grid(mmm: xr.DataArray, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    da = mmm.squeeze([d for d in mmm.dims if d not in ("lat", "lon") and mmm.sizes[d] == 1], drop=True)
    if set(da.dims) != {"lat", "lon"}:
        raise InputError(f"The mmm climatology must have dims (lat, lon); got {tuple(mmm.dims)}.")
    pick = da.sel(lat=xr.DataArray(lat, dims="p"), lon=xr.DataArray(lon, dims="p"), method="nearest")
    values = np.asarray(pick.values, dtype=np.float64)
    # a cell outside the climatology's extent gets no MMM (never the edge value)
    la_e = cell_edges(np.sort(np.asarray(da["lat"].values, dtype=np.float64)))
    lo_e = cell_edges(np.sort(np.asarray(da["lon"].values, dtype=np.float64)))
    span = lo_e[-1] - lo_e[0]
    inside_lon = np.ones(lon.shape, bool) if span >= 360.0 - 1e-6 else (lon >= lo_e[0]) & (lon <= lo_e[-1])
    inside = (lat >= la_e[0]) & (lat <= la_e[-1]) & inside_lon
    return np.where(inside, values, np.nan)


def compute_values(
    X: np.ndarray,
    xrow: np.ndarray,
    srcs: Sources,
    steps: Steps,
    spans: Spans,
    st: StatSpec,
    weights: str,
    in_base: np.ndarray,
    mmm: float | xr.DataArray | None,
    geom: GridGeometry,
    rule: str,
) -> tuple[np.ndarray, np.ndarray, RowFlags]:
    """Value and coverage of every row (NaN / 0 where it has no source) and extra flags."""
    n = srcs.row_src.size
    value, cov = np.full(n, np.nan), np.zeros(n)
    extra = RowFlags(n)
    nsrc = srcs.ptr.size - 1
    if st.kind == "anomaly":
        keys = steps.month - 1 if steps.monthly else (steps.month - 1) * 31 + steps.day - 1
        nkeys = 12 if steps.monthly else 372
    for a, b, rows in _blocks(srcs.row_src, nsrc, X.shape[1]):
        S = _source_series(X, xrow, srcs, a, b)
        loc = srcs.row_src[rows] - a
        sp = _sub(spans, rows)
        kind = st.kind
        if kind == "anomaly":
            clim = climatology(S, keys, nkeys, in_base)
            v, c = window_stat(S - clim[:, keys], steps, loc, sp, "mean", weights=weights)
        elif kind in ("mmm", "dhw-max"):
            if kind == "dhw-max" and isinstance(mmm, float):
                m = np.full(b - a, mmm)
            elif kind == "dhw-max" and isinstance(mmm, xr.DataArray):
                rep = srcs.cells[srcs.ptr[a:b]]
                la, lo = geom.cell_latlon(rep)
                m = _mmm_from_grid(mmm, la, lo)
            else:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    m = np.nanmax(monthly_climatology(S, steps, in_base), axis=1)
            if kind == "mmm":
                _, c = window_stat(S, steps, loc, sp, "sum", weights=weights)
                v = m[loc]
            else:
                v, c = window_stat(dhw_series(S, m), steps, loc, sp, "max", weights=weights)
                no_mmm = ~np.isfinite(m[loc])
                v = np.where(no_mmm, np.nan, v)
                extra.add(rows[no_mmm & (c > 0)], "no_mmm")
        else:
            v, c = window_stat(S, steps, loc, sp, kind, weights=weights, q=st.q, threshold=st.threshold)
        value[rows], cov[rows] = v, c
        if rule == "bilinear":
            base = srcs.ptr[srcs.row_src[rows]]
            for k in range(4):
                ck = coverage(X, steps, xrow[base + k], sp)
                miss = (srcs.weights[base + k] > 0) & (ck < c - 1e-9)
                extra.add(rows[miss], "bilinear_missing_neighbour")
    return value, cov, extra


def _ranges(starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(s, s + c)`` for each (start, count), without a Python loop.

    Examples
    --------
    >>> _ranges(np.array([5, 0, 9]), np.array([2, 0, 3])).tolist()
    [5, 6, 9, 10, 11]
    """
    counts = np.asarray(counts, dtype=np.int64)
    total = int(counts.sum())
    if total == 0:
        return np.array([], dtype=np.int64)
    first = np.cumsum(counts) - counts  # position of each range's first element
    return np.repeat(np.asarray(starts, dtype=np.int64) - first, counts) + np.arange(total, dtype=np.int64)


def _halo(geom: GridGeometry, lat: np.ndarray, km: float) -> tuple[int, int] | None:
    """Cells (rows, columns) within which a ``nearest-valid`` candidate can lie."""
    if geom.kind != "regular" or lat.size == 0:
        return None
    dlat = float(np.min(np.diff(geom.lat_edges))) * _KM_PER_DEG
    dlon = float(np.min(np.diff(geom.lon_edges))) * _KM_PER_DEG
    reach = km + np.hypot(dlat, dlon)
    coslat = max(np.cos(np.radians(min(float(np.nanmax(np.abs(lat))) + reach / _KM_PER_DEG, 89.0))), 1e-3)
    return int(np.ceil(reach / dlat)), int(min(np.ceil(reach / (dlon * coslat)), geom.shape[1]))


def nearest_valid(
    grid: xr.DataArray,
    geom: GridGeometry,
    steps: Steps,
    spans: Spans,
    srcs: Sources,
    lat: np.ndarray,
    lon: np.ndarray,
    active: np.ndarray,
    km: float,
    min_cov: float,
    flags: RowFlags,
    show: bool | None,
) -> tuple[np.ndarray, Sources]:
    """Read cells and choose, per row, the nearest cell with data in its window.

    The row's own (nearest) cell is kept when its coverage reaches ``min_cov`` (and
    is above zero); otherwise the cells whose centres lie within ``km`` are tried in
    order of distance. Cells known to hold no data at any step are skipped unread.
    """
    from envlink.extract.attach import _progress

    thr = max(min_cov, 1e-9)
    any_valid = np.full(geom.shape, -1, dtype=np.int8)
    halo = _halo(geom, lat[active], km)
    with _progress(show, lat.size, srcs.cells.size, "attach: reading cells") as bar:
        X, spare_cells, spare_X = read_cells_near_gaps(
            grid, srcs.cells, progress=bar.update, any_valid=any_valid, halo=halo
        )
    cells = srcs.cells.copy()
    row_x = srcs.row_src.copy()
    cov0 = coverage(X, steps, row_x, spans)
    fail = active & ((row_x < 0) | (cov0 < thr))
    row_cell, row_dist = srcs.row_cell.copy(), srcs.row_dist.copy()
    if fail.any():
        fr = np.nonzero(fail)[0]
        key = np.column_stack([lat[fr], lon[fr]])
        usite, inv = np.unique(key, axis=0, return_inverse=True)
        inv = inv.ravel()
        ptr, cand, dist = geom.within(usite[:, 0], usite[:, 1], km)
        flat_valid = any_valid.ravel()
        keep = flat_valid[cand] != 0
        new = np.setdiff1d(cand[keep], cells)
        # candidates already gathered with the first read (near cells lacking data)
        have = np.isin(new, spare_cells)
        parts, part_cells = [X], [cells]
        if have.any():
            o = np.argsort(spare_cells)
            parts.append(spare_X[o[np.searchsorted(spare_cells[o], new[have])]])
            part_cells.append(new[have])
        rest = new[~have]
        if rest.size:
            with _progress(show, lat.size, rest.size, "attach: reading candidate cells") as bar:
                parts.append(read_cells(grid, rest, progress=bar.update))
            part_cells.append(rest)
        del spare_X
        if len(parts) > 1:  # one copy of the (large) cell series, not one per part
            X, cells = np.concatenate(parts, axis=0), np.concatenate(part_cells)
        del parts
        order = np.argsort(cells, kind="stable")
        # candidate pairs (row, cell) in order of distance, skipping known-empty cells
        counts = np.diff(ptr)
        starts = ptr[:-1]
        pr = np.repeat(fr, counts[inv])
        pos = _ranges(starts[inv], counts[inv])
        ok = keep[pos]
        pr, pos = pr[ok], pos[ok]
        px = order[np.searchsorted(cells[order], cand[pos])]
        # coverage of the candidate pairs from their own cells only (not all of X)
        upx, lpx = np.unique(px, return_inverse=True)
        pcov = coverage(X[upx], steps, lpx.ravel(), _sub(spans, pr))
        good = pcov >= thr
        # pairs are in row order, each row's candidates by distance: first good one wins
        gr, first = np.unique(pr[good], return_index=True)
        gx, gp = px[good][first], pos[good][first]
        ok_rows = np.isin(fr, gr)
        row_x[gr], row_cell[gr], row_dist[gr] = gx, cells[gx], dist[gp]
        missing = fr[~ok_rows]
        row_x[missing] = -1
        moved_mask = srcs.row_cell[gr] != cells[gx]
        moved = gr[moved_mask]
        moved_code = [f"nearest_valid_{int(round(float(d)))}km" for d in dist[gp][moved_mask]]
        missing_a = np.asarray(missing, dtype=np.int64)
        flags.add(missing_a[srcs.row_cell[missing_a] < 0], "outside_grid")
        flags.add(missing_a, f"no_valid_cell_within_{km:g}km")
        flags.add(np.asarray(moved, dtype=np.int64), np.asarray(moved_code, dtype=object))
    out = Sources(np.arange(cells.size + 1), cells, np.ones(cells.size), row_x, row_cell, row_dist, RowFlags(lat.size))
    return X, out
