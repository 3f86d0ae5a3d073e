"""Hand-computed degree heating weeks, following NOAA Coral Reef Watch's method.

Method (Liu et al. 2014, "Reef-scale thermal stress monitoring of coral ecosystems:
new 5-km global products from NOAA Coral Reef Watch", Remote Sensing 6, 11579-11606;
Skirving et al. 2020, "CoralTemp and the Coral Reef Watch Coral Bleaching Heat Stress
Product Suite Version 3.1", Remote Sensing 12, 3856):

- HotSpot (HS) = SST − MMM (maximum of the monthly mean climatology);
- only HotSpots of at least 1 °C accumulate;
- DHW on a day = the sum of those HotSpots over the trailing 84 days (12 weeks,
  the day included) divided by 7, in °C-weeks.

The series below were worked by hand from these rules (arithmetic checked with a
pocket calculator); they are not output of any program.
"""

from __future__ import annotations

#: Maximum monthly mean used for the series, °C.
MMM = 28.0

#: Daily SST, °C, day 0 = 2010-01-01 (120 days):
#: days 0-9 at 28.5 (HS 0.5: no accumulation), day 10 at 28.8 (HS 0.8: must NOT
#: accumulate), day 11 at 29.0 (HS exactly 1.0: MUST accumulate), days 12-20 at 30.0
#: (HS 2.0), days 21-119 at 27.5 (HS −0.5).
SST = [28.5] * 10 + [28.8] + [29.0] + [30.0] * 9 + [27.5] * 99

#: DHW by hand on chosen days, °C-weeks:
#: day 10: nothing has accumulated -> 0;
#: day 11: 1.0 / 7;
#: day 20: (1.0 + 9 × 2.0) / 7 = 19 / 7;
#: day 94: the trailing window is days 11-94, still 19 / 7;
#: day 95: day 11 has left the window (days 12-95): 18 / 7;
#: day 104: days 21-104 hold no HotSpot ≥ 1: 0.
DHW_BY_DAY = {10: 0.0, 11: 1.0 / 7.0, 20: 19.0 / 7.0, 94: 19.0 / 7.0, 95: 18.0 / 7.0, 104: 0.0}

#: Window maxima by hand (inclusive ISO dates, day 0 = 2010-01-01):
#: days 0-10 -> 0; days 0-11 -> 1/7; the whole series -> 19/7; days 95-119 -> 18/7.
WINDOW_MAX = [
    ("2010-01-01", "2010-01-11", 0.0),
    ("2010-01-01", "2010-01-12", 1.0 / 7.0),
    ("2010-01-01", "2010-04-30", 19.0 / 7.0),
    ("2010-04-06", "2010-04-30", 18.0 / 7.0),
]
