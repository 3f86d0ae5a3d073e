"""Plausible sampling windows for rows whose dates are imprecise, drawn for multiple imputation.

A located row's period is its reported dates read as an inclusive window; where
those dates are vague the true sampling days are unknown. :func:`draw_periods`
draws ``M`` plausible windows per row by these rules (docs/locate-periods.md,
"Imprecise dates"):

- **sub-window**: a period of ``month``, ``season``, ``year`` or ``years`` precision
  with a stated sampling effort (a number of days, in the ``effort`` column) shorter
  than the period becomes a window of that many days placed uniformly at random
  within the period (every whole-day start equally likely);
- **day/month order**: a numeric date whose day and month can be swapped
  (flagged ``ambiguous_day_month``) takes each valid reading with equal chance;
- **season reading**: a plain season at a southern site (flagged
  ``ambiguous_season``) takes the austral and the boreal reading with equal chance;
- **fixed**: every other row keeps its located window (day-precision periods are
  taken as stated, and so are vague ones without a stated effort).

An ambiguous row is re-read from its original text (``period=``, or ``start=`` and
``end=`` columns, with the locate options), and a drawn reading is then subject to
the sub-window rule too. Draws are seeded.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd

from envlink.core.flags import split_flags
from envlink.errors import InputError
from envlink.locate._periodtext import PeriodError
from envlink.locate.periods import parse_period, parse_period_columns

__all__ = ["PlausiblePeriods", "draw_periods", "RULES", "VAGUE"]

#: the drawing rules, in the order they are reported
RULES = ("fixed", "sub-window", "day/month order", "season reading")
#: precisions whose windows are coarser than the sampling itself
VAGUE = ("month", "season", "year", "years")


@dataclass
class PlausiblePeriods:
    """``M`` drawn windows per row (inclusive ISO dates) and the rule used for each row."""

    start: np.ndarray  # (M, n) object array of ISO dates or None
    end: np.ndarray
    rule: list[str]

    @property
    def counts(self) -> dict[str, int]:
        """Rows per rule."""
        c = Counter(self.rule)
        return {r: int(c.get(r, 0)) for r in RULES}

    def table(self, located: pd.DataFrame, m: int) -> pd.DataFrame:
        """``located`` with draw ``m``'s windows as its ``period_start`` / ``period_end``."""
        out = located.copy()
        out["period_start"] = pd.array(list(self.start[m]), dtype="string")
        out["period_end"] = pd.array(list(self.end[m]), dtype="string")
        return out


def _readings(text: Any, start: Any, end: Any, code: str, lat: float,
              options: Mapping[str, Any]) -> list[tuple[str, str, Any]]:
    """The valid readings of an ambiguous period: (start, end) ISO dates and the precision."""
    hemisphere: Literal["north", "south"] | None = ("north" if lat > 0 else "south" if lat < 0
                                                    else None)
    variants: Sequence[dict[str, Any]] = (
        [{"order": "dayfirst"}, {"order": "monthfirst"}] if code == "ambiguous_day_month"
        else [{"plain_season_south": "austral"}, {"plain_season_south": "boreal"}])
    out: list[tuple[str, str, Any]] = []
    for extra in variants:
        opts = {"season_months": options.get("season_months"), "order": options.get("order"),
                "plain_season_south": options.get("plain_season_south", "ambiguous"), **extra}
        try:
            if text is not None:
                p = parse_period(text, hemisphere=hemisphere, **opts)
            else:
                p = parse_period_columns(start, end, hemisphere=hemisphere, **opts)
        except PeriodError:
            continue
        if p is not None and p.start is not None and p.end is not None:
            out.append((p.start.isoformat(), p.end.isoformat(), p.precision))
    return list(dict.fromkeys(out))


def _days(text: Any) -> np.datetime64 | None:
    try:
        d = np.datetime64(str(text)[:10], "D")
    except ValueError:
        return None
    return None if np.isnat(d) else d


def _sub_window(rng: np.random.Generator, s: str, e: str, effort: float) -> tuple[str, str]:
    a, b = _days(s), _days(e)
    if a is None or b is None:
        return s, e
    length = int((b - a).astype(int)) + 1
    days = int(round(effort))
    if days < 1 or days >= length:
        return s, e
    first = a + np.timedelta64(int(rng.integers(0, length - days + 1)), "D")
    return str(first), str(first + np.timedelta64(days - 1, "D"))


def draw_periods(located: pd.DataFrame, draws: int = 20, *, seed: int | None = None,
                 effort: str | None = None, period: str | None = None, start: str | None = None,
                 end: str | None = None, **locate_options: Any) -> PlausiblePeriods:
    """Draw ``draws`` plausible windows for every row (the rules in the module docs).

    Parameters
    ----------
    located : pandas.DataFrame
        The output of :func:`envlink.locate` (``period_start``, ``period_end``,
        ``period_precision``, ``locate_flags``, ``site_lat``).
    draws : int, default 20
    seed : int, optional
    effort : str, optional
        Column holding each row's sampling effort in days.
    period, start, end : str, optional
        The original period column(s), to re-read ambiguous rows.
    **locate_options
        ``order``, ``plain_season_south``, ``season_months`` as given to locate.

    Returns
    -------
    PlausiblePeriods

    Examples
    --------
    >>> t = pd.DataFrame({"when": ["2004", "05/06/2011"], "days": [10, None]})
    >>> from envlink.locate.sites import locate
    >>> loc = locate(t.assign(lat=[-9.0, -9.0], lon=[120.0, 120.0]), lat="lat", lon="lon",
    ...              period="when")
    >>> p = draw_periods(loc, 4, seed=1, effort="days", period="when")
    >>> p.rule, sorted(set(p.start[:, 1]))
    (['sub-window', 'day/month order'], ['2011-05-06', '2011-06-05'])
    """
    if not isinstance(draws, int) or draws < 1:
        raise InputError(f"draws must be a whole number >= 1; got {draws!r}.")
    need = ["period_start", "period_end", "period_precision", "locate_flags", "site_lat"]
    missing = [c for c in need + [c for c in (effort, period, start, end) if c]
               if c not in located.columns]
    if missing:
        raise InputError(f"draw_periods needs the columns {', '.join(missing)}; locate the table "
                         "first (envlink.locate) and name existing columns.")
    rng = np.random.default_rng(seed)
    n = len(located)
    eff = (pd.to_numeric(located[effort], errors="coerce").to_numpy(dtype=np.float64)
           if effort else np.full(n, np.nan))
    out_s = np.empty((draws, n), dtype=object)
    out_e = np.empty((draws, n), dtype=object)
    rules: list[str] = []
    for i, row in enumerate(located[need].itertuples(index=False)):
        flags = set(split_flags(row.locate_flags if isinstance(row.locate_flags, str) else ""))
        code = next((c for c in ("ambiguous_day_month", "ambiguous_season") if c in flags), None)
        readings: list[tuple[Any, Any, Any]] = [(row.period_start, row.period_end,
                                                 row.period_precision)]
        rule = "fixed"
        if code is not None and (period or start or end):
            texts = located.iloc[i]
            found = _readings(texts[period] if period else None, texts[start] if start else None,
                              texts[end] if end else None, code, float(row.site_lat),
                              locate_options)
            if found:
                readings = found
                rule = "day/month order" if code == "ambiguous_day_month" else "season reading"
        subs = [isinstance(r[2], str) and r[2] in VAGUE and bool(eff[i] > 0)
                and r[0] is not None and not pd.isna(r[0]) for r in readings]
        if rule == "fixed" and subs[0]:
            rule = "sub-window"
        rules.append(rule)
        for m in range(draws):
            j = int(rng.integers(0, len(readings))) if len(readings) > 1 else 0
            s, e, _ = readings[j]
            if subs[j]:
                s, e = _sub_window(rng, str(s), str(e), float(eff[i]))
            out_s[m, i] = None if s is None or pd.isna(s) else str(s)
            out_e[m, i] = None if e is None or pd.isna(e) else str(e)
    return PlausiblePeriods(out_s, out_e, rules)
