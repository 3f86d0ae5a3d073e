"""Reference facts for reading climate grids, each with its source.

Sources:

- [CF] NetCDF Climate and Forecast (CF) Metadata Conventions, version 1.11 (2023),
  https://cfconventions.org/Data/cf-conventions/cf-conventions-1.11/cf-conventions.html
- [SI] BIPM, The International System of Units (SI Brochure), 9th edition (2019).
- [NIST811] NIST Special Publication 811 (2008), Guide for the Use of the SI.
"""

from __future__ import annotations

#: [SI] §2.3.1: the Celsius temperature is t/°C = T/K - 273.15 (exact, by definition).
KELVIN_AT_ZERO_CELSIUS = 273.15

#: [NIST811] Appendix B.9 (from memory): t/°C = (t/°F - 32) / 1.8.
FAHRENHEIT_OFFSET = 32.0
FAHRENHEIT_PER_CELSIUS = 1.8

#: [SI] Table 8: the day, d = 86 400 s.
SECONDS_PER_DAY = 86400.0

#: Density of liquid water used to turn kg m-2 into mm: 1 kg m-2 = 1 mm of water
#: (common practice in hydrology and in CF standard names such as
#: ``lwe_precipitation_rate``, "liquid water equivalent").
WATER_DENSITY_KG_M3 = 1000.0

#: [CF] §8.1: unpacked = packed * scale_factor + add_offset.
def cf_unpack(packed: float, scale_factor: float, add_offset: float) -> float:
    return packed * scale_factor + add_offset


#: [CF] §4.4.1 calendars and their month lengths (February; other months as Gregorian,
#: except 360_day where every month has 30 days).
FEBRUARY_DAYS = {
    "noleap": {2001: 28, 2000: 28, 1900: 28},
    "365_day": {2001: 28, 2000: 28, 1900: 28},
    "all_leap": {2001: 29, 2000: 29, 1900: 29},
    "366_day": {2001: 29, 2000: 29, 1900: 29},
    "360_day": {2001: 30, 2000: 30, 1900: 30},
    # Julian: every fourth year is a leap year, 1900 included.
    "julian": {2001: 28, 2000: 29, 1900: 29},
    # Gregorian: 1900 is not a leap year (divisible by 100, not by 400); 2000 is.
    "proleptic_gregorian": {2001: 28, 2000: 29, 1900: 28},
    "standard": {2001: 28, 2000: 29, 1900: 28},
    "gregorian": {2001: 28, 2000: 29, 1900: 28},
}

#: [CF] §4.4.1: days in a year, by calendar (the year 2000 for the Gregorian ones).
YEAR_DAYS_2000 = {
    "standard": 366,
    "gregorian": 366,
    "proleptic_gregorian": 366,
    "julian": 366,
    "noleap": 365,
    "365_day": 365,
    "all_leap": 366,
    "366_day": 366,
    "360_day": 360,
}
