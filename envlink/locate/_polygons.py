"""Gazetteer polygons checked before use: invalid ones repaired (with a flag) or named, degenerate ones named.

Private to the gazetteer readers (:mod:`envlink.locate._gazetteer_read`). A polygon
digitised by hand may cross itself (a bow tie), repeat a point, or have no area at
all (every point on a line). Such a polygon must not become a confident site:

- an invalid polygon (shapely's ``is_valid`` is false) is repaired with shapely's
  ``make_valid`` (its polygonal parts kept) and flagged ``polygon_repaired``, the
  reason in the note; with ``repair=False`` it is not used;
- a polygon with no area (before or after repair) is never used.

A polygon that is not used keeps its gazetteer entry with the reason: a row whose
name matches it is rejected with the code ``site_polygon_degenerate`` and the reason
in its note, while the other sites of the gazetteer stay usable.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

__all__ = ["CheckedPolygon", "check_polygon", "REPAIRED", "DEGENERATE"]

#: QA flag of a site whose polygon was repaired.
REPAIRED = "polygon_repaired"
#: QA code of a row whose site's polygon cannot be used.
DEGENERATE = "site_polygon_degenerate"


@dataclass(frozen=True)
class CheckedPolygon:
    """A polygon ready for use, or the reason it is not."""

    geometry: Any
    flags: tuple[str, ...] = ()
    note: str | None = None
    problem: str | None = None


def _polygonal(geom: Any) -> Any:
    """The polygonal part of a geometry (``make_valid`` may add lines or points)."""
    import shapely

    if geom.geom_type in ("Polygon", "MultiPolygon"):
        return geom
    parts = [g for g in getattr(geom, "geoms", []) if g.geom_type in ("Polygon", "MultiPolygon")]
    polys = [p for g in parts for p in getattr(g, "geoms", [g])]
    return shapely.MultiPolygon(polys) if len(polys) > 1 else (polys[0] if polys else None)


def check_polygon(geom: Any, *, repair: bool = True) -> CheckedPolygon:
    """Check one polygon of a gazetteer (see the module docs).

    Examples
    --------
    >>> import shapely
    >>> bow_tie = shapely.Polygon([(0, 0), (1, 1), (1, 0), (0, 1)])
    >>> c = check_polygon(bow_tie)
    >>> c.flags, c.geometry.geom_type, round(c.geometry.area, 3)
    (('polygon_repaired',), 'MultiPolygon', 0.5)
    >>> check_polygon(shapely.Polygon([(0, 0), (1, 1), (2, 2)])).problem
    'has no area (its points lie on one line or repeat one point)'
    """
    import shapely

    flags: tuple[str, ...] = ()
    note = None
    if not geom.is_valid:
        reason = shapely.is_valid_reason(geom)
        if not repair:
            return CheckedPolygon(None, problem=f"is not a valid polygon ({reason}); it was not repaired")
        fixed = _polygonal(shapely.make_valid(geom))
        if fixed is None or fixed.is_empty or fixed.area <= 0.0:
            return CheckedPolygon(None, problem="has no area (its points lie on one line or repeat one point)")
        flags, geom = (REPAIRED,), fixed
        note = f"was not a valid polygon ({reason}) and was repaired with shapely's make_valid"
    if geom.area <= 0.0:
        return CheckedPolygon(None, problem="has no area (its points lie on one line or repeat one point)")
    return CheckedPolygon(geom, flags, note)
