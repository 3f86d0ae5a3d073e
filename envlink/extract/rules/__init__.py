"""The spatial rules of ``attach`` (``spatial=`` / ``--spatial``): one module per rule, one registry.

:data:`SPATIAL_RULES` maps each name to its :class:`~envlink.extract.rules.base.SpatialRule`
object, which holds the rule's argument, its facts (does it read polygons, does
it read candidate cells itself) and its steps (choosing sources, reading, extra QA
codes). The Python API, the command line, the project file and the docs read
this registry; the pipeline only ever calls the looked-up object, so no name can
fall into another rule's branch. Adding a rule means one module here and one
line below.

Examples
--------
>>> SPATIAL_RULES.parse("Nearest_Valid:60KM").label(), SPATIAL_RULES.parse("buffer:25").label()
('nearest-valid:60km', 'buffer:25km')
>>> SPATIAL_RULES["polygon"].obj.needs_wkt, SPATIAL_RULES["nearest-valid"].obj.reads_candidates
(True, True)
"""

from __future__ import annotations

from envlink.core.registry import Registry
from envlink.extract.rules import bilinear, buffer, nearest, nearest_valid, polygon
from envlink.extract.rules.base import SpatialRule

__all__ = ["SPATIAL_RULES", "SpatialRule"]

#: The spatial rules, in the order the docs list them.
SPATIAL_RULES: Registry[SpatialRule] = Registry("spatial rule", param="spatial", caller="attach")
for _module in (nearest, bilinear, nearest_valid, buffer, polygon):
    SPATIAL_RULES.add(_module.RULE.entry())
