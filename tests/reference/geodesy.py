"""Reference values for geodesy on the IUGG mean sphere, with their sources.

Closed forms (spherical trigonometry, any textbook; e.g. Snyder 1987, "Map
Projections: A Working Manual", USGS PP 1395, eq. 5-3a for the haversine and p. 78
for the area of a spherical zone) evaluated by hand with Python's ``math`` module.
"""

from __future__ import annotations

#: IUGG mean Earth radius R1 = (2a + b) / 3 of GRS80, km (Moritz 2000, "Geodetic
#: Reference System 1980", J. Geodesy 74, p. 128: R1 = 6371008.7714 m; the
#: common rounding is 6371.0088 km).
IUGG_MEAN_RADIUS_KM = 6371.0088

#: Area of a 1°×1° cell with its south edge on the equator: R² · (π/180) · sin 1°,
#: evaluated with math.radians / math.sin (closed form R²Δλ(sin φ₂ − sin φ₁)).
#: The issue quotes "about 12,364 km²" (rounded).
CELL_1DEG_EQUATOR_KM2 = 12363.718145180046

#: Length of one degree of arc on the mean sphere: R · π / 180 (closed form).
ONE_DEGREE_ARC_KM = 111.1950802335329

#: Largest relative difference expected between great-circle distances on the mean
#: sphere and WGS84 geodesics (pyproj.Geod): about 0.5 %, since the meridional
#: radius of curvature ranges over 6335-6400 km (common practice; from memory).
SPHERE_VS_ELLIPSOID_RTOL = 6e-3
