"""The Earth's size as envlink uses it: one radius, one length of a degree.

Great-circle distances use a sphere of the IUGG mean radius R1 = 6371.0088 km
(Moritz 2000, Geodetic Reference System 1980); a degree of latitude (or of
longitude on the equator) is then pi * R1 / 180 = 111.195 km.
"""

from __future__ import annotations

import math

__all__ = ["EARTH_RADIUS_KM", "KM_PER_DEG"]

#: IUGG mean Earth radius R1, km.
EARTH_RADIUS_KM = 6371.0088
#: Length of one degree of a great circle on that sphere, km.
KM_PER_DEG = math.pi * EARTH_RADIUS_KM / 180.0
