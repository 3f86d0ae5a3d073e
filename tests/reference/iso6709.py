"""Reference point strings from ISO 6709 with their decimal-degree values.

Source: ISO 6709:2008, "Standard representation of geographic point location by
coordinates", Annex H (text string representation of point location). The standard is
not available here: the strings below are recalled **from memory**, and their decimal
values are worked by hand from the form the annex describes:

- latitude ``±DD[.D…]``, ``±DDMM[.M…]`` or ``±DDMMSS[.S…]`` (2 integer degree digits),
- longitude ``±DDD[.D…]``, ``±DDDMM[.M…]`` or ``±DDDMMSS[.S…]`` (3 integer degree digits),
- then an optional altitude ``±A[.A…]``, an optional ``CRS`` identifier, and ``/``;
- the number of digits written gives the resolution of each coordinate.

Each entry: the string, latitude and longitude in decimal degrees (hand-computed
from the digits: D + M/60 + S/3600), the unit of the last written part ("deg", "min",
"sec") and the number of decimals in it, and the source line.
"""

from __future__ import annotations

ANNEX_H = [
    # ISO 6709:2008 Annex H, decimal degrees, no altitude (from memory)
    {"text": "+40.20361-075.00417/", "lat": 40.20361, "lon": -75.00417,
     "unit": "deg", "decimals": 5, "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H, degrees and decimal minutes: 40 + 12.22/60, -(75 + 0.25/60)
    {"text": "+4012.22-07500.25/", "lat": 40 + 12.22 / 60, "lon": -(75 + 0.25 / 60),
     "unit": "min", "decimals": 2, "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H, DMS with decimal seconds: 40 + 12/60 + 13.1/3600, -(75 + 15.1/3600)
    {"text": "+401213.1-0750015.1/", "lat": 40 + 12 / 60 + 13.1 / 3600,
     "lon": -(75 + 15.1 / 3600), "unit": "sec", "decimals": 1,
     "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H, whole degrees
    {"text": "+40-075/", "lat": 40.0, "lon": -75.0, "unit": "deg", "decimals": 0,
     "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H, DMS with altitude 2.79 and CRS WGS_84 (altitude is ignored)
    {"text": "+401213.1-0750015.1+2.79CRSWGS_84/", "lat": 40 + 12 / 60 + 13.1 / 3600,
     "lon": -(75 + 15.1 / 3600), "unit": "sec", "decimals": 1,
     "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H style, whole degrees and minutes (from memory)
    {"text": "+4012-07500/", "lat": 40.2, "lon": -75.0, "unit": "min", "decimals": 0,
     "source": "ISO 6709:2008 Annex H, from memory"},
    # ISO 6709:2008 Annex H style, whole seconds (from memory)
    {"text": "+401213-0750015/", "lat": 40 + 12 / 60 + 13 / 3600, "lon": -(75 + 15 / 3600),
     "unit": "sec", "decimals": 0, "source": "ISO 6709:2008 Annex H, from memory"},
    # the North Pole, a commonly quoted ISO 6709 example (from memory)
    {"text": "+90+000/", "lat": 90.0, "lon": 0.0, "unit": "deg", "decimals": 0,
     "source": "ISO 6709 commonly quoted example, from memory"},
    # the South Pole, a commonly quoted ISO 6709 example (from memory)
    {"text": "-90+000/", "lat": -90.0, "lon": 0.0, "unit": "deg", "decimals": 0,
     "source": "ISO 6709 commonly quoted example, from memory"},
    # a point in the Atlantic Ocean on the equator, commonly quoted (from memory)
    {"text": "+00-025/", "lat": 0.0, "lon": -25.0, "unit": "deg", "decimals": 0,
     "source": "ISO 6709 commonly quoted example, from memory"},
    # a summit with altitude in metres and CRS, commonly quoted (from memory)
    {"text": "+27.5916+086.5640+8850CRSWGS_84/", "lat": 27.5916, "lon": 86.5640,
     "unit": "deg", "decimals": 4, "source": "ISO 6709 commonly quoted example, from memory"},
]

#: the same points written for people as ISO 6709:2008 Annex D (human interface) shows
#: them, degrees/minutes/seconds with hemisphere letters (from memory)
HUMAN_FORMS = [
    {"text": "40°12'13.1\"N 75°00'15.1\"W", "lat": 40 + 12 / 60 + 13.1 / 3600,
     "lon": -(75 + 15.1 / 3600), "unit": "sec", "decimals": 1,
     "source": "ISO 6709:2008 Annex D, from memory"},
    {"text": "40°12.22'N 75°00.25'W", "lat": 40 + 12.22 / 60, "lon": -(75 + 0.25 / 60),
     "unit": "min", "decimals": 2, "source": "ISO 6709:2008 Annex D, from memory"},
    {"text": "40.20361°N 75.00417°W", "lat": 40.20361, "lon": -75.00417, "unit": "deg",
     "decimals": 5, "source": "ISO 6709:2008 Annex D, from memory"},
]
