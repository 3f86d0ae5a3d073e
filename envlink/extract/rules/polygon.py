"""The ``polygon`` spatial rule: the cells a site's polygon overlaps, weighted by the area inside it."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from envlink.extract.rules.base import SpatialRule

if TYPE_CHECKING:
    from envlink.extract.plan import ExtractionPlan
    from envlink.extract.sources import Sources
    from envlink.extract.spatial import GridGeometry

__all__ = ["Polygon", "RULE"]


class Polygon(SpatialRule):
    """Rows with a polygon (``site_wkt``) read the cells it overlaps, weighted by the
    spherical area inside it; rows without one use their nearest cell."""

    def in_lon_gap(self, geom: GridGeometry, lon: np.ndarray, wkt: np.ndarray, active: np.ndarray) -> np.ndarray:
        """Point sites in the gap, and polygons with every vertex in it."""
        from envlink.extract.gaps import lon_gaps

        gap = super().in_lon_gap(geom, lon, wkt, active)
        if not lon_gaps(geom):
            return gap
        has_wkt = np.char.str_len(np.char.strip(wkt)) > 0
        return np.where(has_wkt, _polygon_in_lon_gap(geom, wkt, active & has_wkt), gap)

    def sources(self, plan: ExtractionPlan) -> Sources:
        from envlink.extract.sources import Sources, single_cell_sources, site_cells
        from envlink.extract.spatial import polygon_cells
        from envlink.geo import great_circle_km

        geom, lat, lon, wkt, active = plan.geom, plan.lat, plan.lon, plan.wkt, plan.active
        has_poly = active & (wkt != "")
        base = single_cell_sources(site_cells(geom, lat, lon, active & ~has_poly, plan.shared), plan.n)
        ptr, cells, weights = [int(x) for x in base.ptr], [base.cells], [base.weights]
        row_src, row_cell = base.row_src.copy(), base.row_cell.copy()
        flags = base.row_flags
        flags.add(active & ~has_poly, "point_site_nearest_cell")
        polys, inv = np.unique(wkt[has_poly], return_inverse=True)
        rows = np.nonzero(has_poly)[0]
        for k, text in enumerate(polys):
            c, a, small = polygon_cells(geom, str(text))
            these = rows[inv.ravel() == k]
            if c.size == 0:
                flags.add(these, "outside_grid")
                continue
            src = len(ptr) - 1
            cells.append(c)
            weights.append(a)
            ptr.append(ptr[-1] + c.size)
            row_src[these], row_cell[these] = src, c[np.argmax(a)]
            if small:
                flags.add(these, "polygon_smaller_than_cell")
        la, lo = geom.cell_latlon(row_cell)
        row_dist = np.where(row_cell >= 0, great_circle_km(lat, lon, la, lo), np.nan)
        return Sources(np.asarray(ptr), np.concatenate(cells).astype(np.int64), np.concatenate(weights), row_src,
                       row_cell, row_dist, flags)


def _polygon_in_lon_gap(geom: GridGeometry, wkt: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rows (of ``rows``) whose polygon has every vertex in the grid's longitude gap."""
    import shapely

    from envlink.extract.gaps import in_lon_gap

    out = np.zeros(wkt.shape, dtype=bool)
    idx = np.nonzero(rows)[0]
    if idx.size == 0:
        return out
    try:
        geoms = shapely.from_wkt(wkt[idx], on_invalid="ignore")
    except shapely.errors.ShapelyError:
        return out
    xy, part = shapely.get_coordinates(geoms, return_index=True)
    if part.size == 0:
        return out
    lon = np.mod(xy[:, 0] + 180.0, 360.0) - 180.0
    inside = in_lon_gap(geom, lon)
    n_all = np.bincount(part, minlength=idx.size)
    n_gap = np.bincount(part, weights=inside.astype(np.float64), minlength=idx.size)
    out[idx] = (n_all > 0) & (n_gap == n_all)
    return out


RULE = Polygon(
    "polygon",
    "the cells the site's polygon (`site_wkt`) overlaps, weighted by the spherical area inside it; "
    "point sites use their nearest cell",
    needs_wkt=True,
)
