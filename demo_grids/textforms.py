"""How the invented survey reports write places and dates (used by the demo generator).

Each report keeps one style, as compiled papers do: decimal degrees, degrees-minutes-
seconds with ASCII or Unicode symbols, degrees and decimal minutes, hemisphere
letters, comma decimals, both coordinates in one cell (also ISO 6709), or the site
name only; and month ranges, seasons, ISO 8601 intervals, months or single days.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["COORD_STYLES", "PERIOD_STYLES", "coord_cells", "period_text"]

MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]
LONG_MONTHS = [
    "January", "February", "March", "April", "May", "June", "July", "August",
    "September", "October", "November", "December",
]  # fmt: skip


def _dms(value: float, pos: str, neg: str, style: str) -> str:
    hemi = pos if value >= 0 else neg
    a = abs(value)
    d = int(a)
    m_float = (a - d) * 60
    if style == "dm":
        return f"{d} {m_float:.2f} {hemi}"
    m = int(m_float)
    s = round((m_float - m) * 60)
    if s == 60:
        m, s = m + 1, 0
    if style == "dms_unicode":
        return f"{d}°{m:02d}′{s:02d}″{hemi}"
    return f"{d}°{m:02d}'{s:02d}\"{hemi}"


def coord_cells(style: str, lat: float, lon: float) -> tuple[str, str, str]:
    """(latitude, longitude, coordinates) cells for one row in the study's style."""
    if style == "decimal":
        return f"{lat:.4f}", f"{lon:.4f}", ""
    if style in ("dms", "dms_unicode", "dm"):
        return _dms(lat, "N", "S", style), _dms(lon, "E", "W", style), ""
    if style == "hemisphere":
        return f"{abs(lat):.3f} {'S' if lat < 0 else 'N'}", f"{abs(lon):.3f} {'W' if lon < 0 else 'E'}", ""
    if style == "comma":
        return f"{lat:.4f}".replace(".", ","), f"{lon:.4f}".replace(".", ","), ""
    if style == "coords":
        return "", "", f"{abs(lat):.4f}°S {abs(lon):.4f}°W"
    if style == "iso6709":
        return "", "", f"{lat:+08.4f}{lon:+09.4f}/"
    return "", "", ""  # "name": the gazetteer locates it


def period_text(style: str, rng: np.random.Generator, year: int):
    """(text, start, end) of a sampling period in the study's style."""
    if style == "month_range":
        m0 = int(rng.integers(1, 11))
        m1 = min(12, m0 + int(rng.integers(1, 3)))
        end = pd.Timestamp(year, m1, 1) + pd.offsets.MonthEnd(0)
        return f"{MONTHS[m0 - 1]}-{MONTHS[m1 - 1]} {year}", pd.Timestamp(year, m0, 1), end
    if style == "season":
        end = pd.Timestamp(year + 1, 3, 1) - pd.Timedelta(days=1)
        return f"austral summer {year}/{str(year + 1)[-2:]}", pd.Timestamp(year, 12, 1), end
    if style == "iso_interval":
        start = pd.Timestamp(year, int(rng.integers(1, 11)), int(rng.integers(1, 28)))
        end = start + pd.Timedelta(days=int(rng.integers(10, 60)))
        return f"{start:%Y-%m-%d}/{end:%Y-%m-%d}", start, end
    if style == "month":
        m = int(rng.integers(1, 13))
        end = pd.Timestamp(year, m, 1) + pd.offsets.MonthEnd(0)
        return f"{LONG_MONTHS[m - 1]} {year}", pd.Timestamp(year, m, 1), end
    day = pd.Timestamp(year, int(rng.integers(1, 13)), int(rng.integers(1, 29)))
    return f"{day.day} {LONG_MONTHS[day.month - 1]} {year}", day, day  # "day"


COORD_STYLES = ["decimal", "dms", "hemisphere", "comma", "coords", "name", "dms_unicode",
                "iso6709", "dm", "decimal", "name", "hemisphere", "coords", "dms"]  # fmt: skip
PERIOD_STYLES = ["month_range", "season", "iso_interval", "month", "day", "month_range",
                 "season", "month", "iso_interval", "month_range", "day", "season",
                 "month", "iso_interval"]  # fmt: skip
