"""The vectorised reading of plain decimal degrees and ISO dates equals the per-cell parsers.

``locate`` reads the common forms a column at once (envlink/locate/_fastrows.py) and
sends every other cell to the per-cell parsers. These tests run ``locate`` both ways
over varied tables (the per-cell way by switching the column readers off) and require
every output column, flag and note to be equal, exactly. Expected values come from the
per-cell parsers themselves (the reference here); calendar facts (leap years: every
4th year, not centuries unless divisible by 400) are those of ISO 8601 / the Gregorian
calendar.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from envlink.errors import InputError
from envlink.locate import sites
from envlink.locate._fastrows import fast_lat_lon, fast_period, fast_periods
from envlink.locate.coords import parse_lat_lon
from envlink.locate.periods import parse_period, parse_period_columns

ANGLES = [
    "-0", "+0", "-0.0", "0", "+12.5", " 12.5 ", "\t-45.25\t", "1e-05", "1.5E+01", "-2.5e1",
    "90", "90.0", "90.0000001", "-90", "-90.00", "180", "-180", "-180.0", "179.9999", "360",
    "361", "-181", "", "n/a", "-", "12,5", "12.", ".5", "-.5", "+.25", "- 12", "+ 12", "12°30'S",
    "12.5S", "45.2 W", "N 8", "007.50", "1" + "0" * 400, "0." + "1" * 30, "\u221212.5",
    "\uff11\uff12.5", "1\u200b2.5", "12\u00ad.75", "--12", "+-3", "12.5.1", "0x1A", "inf", "nan",
    "  ", "12 30", "12:30", "1,234.5", "151.9", "-7.3", "95.5", "200.25",
]
DATES = [
    "2011-06-15", "2011-06", "2011", "2000-02-29", "1900-02-29", "2011-02-29", "2012-02",
    "1900-02", "2011-13", "2011-00", "2011-06-00", "2011-06-31", "2011-04-31", "0000", "0001-01-01",
    "9999-12-31", "9999", " 2011-06 ", "\t2011\t", "2011-6", "2011-6-5", "20110615", "summer 2010",
    "Mar 2011", "2011/12", "1990-91", "", "n.d.", "NA", "mid-2014", "2011-06-15T10:00", "05/06/2011",
    "2011-W05", "2011-12", "2012-01", "1995", "1997-03", "2011-06-15 ", "\u200b2011-03-01",
    "2011\u20132013", "c. 2010", "2010s", "2011-06-15/2011-07-01",
]


def _both_ways(monkeypatch: pytest.MonkeyPatch, table: pd.DataFrame, **kwargs: object) -> tuple[pd.DataFrame, pd.DataFrame]:
    fast = sites.locate(table, progress=False, **kwargs)  # type: ignore[arg-type]

    def cell_by_cell(column: pd.Series, plain: bool) -> list[str]:
        read = sites._plain if plain else sites._text
        return [read(v) for v in column.tolist()]

    with monkeypatch.context() as m:
        m.setattr(sites, "_fast_parts", lambda cols, t, out, n: sites._none_done(cols, n))
        m.setattr(sites, "_column_texts", cell_by_cell)
        slow = sites.locate(table, progress=False, **kwargs)  # type: ignore[arg-type]
    return fast, slow


def _assert_same(fast: pd.DataFrame, slow: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(fast, slow, check_exact=True)
    for name in ("site_lat", "site_lon", "site_precision_km"):  # bit for bit, the sign of 0 too
        assert np.array_equal(fast[name].to_numpy().view(np.int64), slow[name].to_numpy().view(np.int64))


def _table(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    pick = lambda values: [values[i] for i in rng.integers(0, len(values), n)]  # noqa: E731
    return pd.DataFrame({"lat": pick(ANGLES), "lon": pick(ANGLES), "start": pick(DATES),
                         "end": pick(DATES), "when": pick(DATES)})


@pytest.mark.parametrize("options", [{}, {"order": "dayfirst"}, {"plain_season_south": "austral"}])
def test_lat_lon_and_start_end_columns_equal_the_cell_parsers(monkeypatch: pytest.MonkeyPatch, options: dict) -> None:
    table = _table(3000, 7)
    pairs = pd.DataFrame(list(itertools.product(ANGLES, ANGLES)), columns=["lat", "lon"])
    pairs["start"], pairs["end"], pairs["when"] = "2011-03", "2011-06-15", "2011"
    dates = pd.DataFrame(list(itertools.product(DATES, DATES)), columns=["start", "end"])
    dates["lat"], dates["lon"], dates["when"] = "-8.5", "160.25", ""
    table = pd.concat([table, pairs, dates], ignore_index=True)
    fast, slow = _both_ways(monkeypatch, table, lat="lat", lon="lon", start="start", end="end", **options)
    _assert_same(fast, slow)
    assert (fast["locate_status"] == "ok").sum() > 1000  # the fast forms are well represented


def test_one_cell_periods_and_other_site_sources_equal_the_cell_parsers(monkeypatch: pytest.MonkeyPatch) -> None:
    table = _table(2000, 11)
    table["coords"] = [f"{a} {b}" if i % 3 else "" for i, (a, b) in enumerate(zip(table["lat"], table["lon"], strict=True))]
    table.loc[::4, "lat"] = ""
    fast, slow = _both_ways(monkeypatch, table, lat="lat", lon="lon", coords="coords", period="when")
    _assert_same(fast, slow)
    fast, slow = _both_ways(monkeypatch, table, coords="coords", start="start", end="end")
    _assert_same(fast, slow)


def test_string_and_object_columns_read_as_the_cell_parsers(monkeypatch: pytest.MonkeyPatch) -> None:
    table = _table(500, 3)
    as_string = table.astype("string")
    as_string.loc[::7, "lat"] = pd.NA
    mixed = table.astype(object)
    mixed.loc[::5, "lon"] = -45.25  # numbers among text: read cell by cell
    mixed.loc[::9, "start"] = None
    for t in (as_string, mixed):
        fast, slow = _both_ways(monkeypatch, t, lat="lat", lon="lon", start="start", end="end")
        _assert_same(fast, slow)


def test_leap_days_and_month_ends() -> None:
    # Gregorian calendar: 2000 and 2012 are leap years, 1900 and 2011 are not
    taken, first, last, unit = fast_periods(["2000-02-29", "1900-02-29", "2012-02", "1900-02", "2011-02-29"],
                                            ["2000-02", "1900-03", "2012-02", "1900-02", "2011-03"])
    assert taken.tolist() == [True, False, True, True, False]
    assert last[[0, 2, 3]].tolist() == ["2000-02-29", "2012-02-29", "1900-02-28"]
    assert unit[[0, 2]].tolist() == ["month", "month"]
    taken, first, last, unit = fast_period(["2011-04", "2011-04-31", "2011"])
    assert taken.tolist() == [True, False, True]
    assert (first[0], last[0], first[2], last[2]) == ("2011-04-01", "2011-04-30", "2011-01-01", "2011-12-31")


def _slow_site(lat: str, lon: str) -> tuple[float, float, float] | None:
    try:
        c = parse_lat_lon(lat, lon)
    except InputError:
        return None
    return None if c.flags else (c.lat, c.lon, c.precision_km)


_DECIMALS = st.builds(
    lambda sign, whole, frac, pad: f"{pad}{sign}{whole}{frac}{pad[::-1]}",
    st.sampled_from(["", "+", "-"]),
    st.one_of(st.integers(0, 400).map(str), st.from_regex(r"[0-9]{1,5}", fullmatch=True), st.just("")),
    st.one_of(st.just(""), st.from_regex(r"\.[0-9]{1,20}", fullmatch=True)),
    st.sampled_from(["", " ", "\t", " \t"]),
).filter(lambda s: any(ch.isdigit() for ch in s))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(_DECIMALS, _DECIMALS), min_size=1, max_size=40))
def test_random_decimals_read_as_parse_lat_lon(pairs: list[tuple[str, str]]) -> None:
    lats, lons = [p[0] for p in pairs], [p[1] for p in pairs]
    taken, lat, lon, km = fast_lat_lon(lats, lons)
    for i, (a, b) in enumerate(pairs):
        slow = _slow_site(a, b)
        # every generated text is a plain decimal: the fast path takes exactly the clean readings
        assert taken[i] == (slow is not None)
        if slow is not None:  # and reads them bit for bit as the parser does (the sign of 0 too)
            assert (lat[i], lon[i], km[i]) == slow
            assert np.signbit(lat[i]) == np.signbit(slow[0]) and np.signbit(lon[i]) == np.signbit(slow[1])


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 9999), st.integers(0, 13), st.integers(0, 32), st.integers(0, 2)),
                min_size=1, max_size=30))
def test_random_iso_dates_read_as_parse_period(parts: list[tuple[int, int, int, int]]) -> None:
    texts = [f"{y:04d}" + (f"-{m:02d}" if form >= 1 else "") + (f"-{d:02d}" if form == 2 else "")
             for y, m, d, form in parts]
    taken, first, last, unit = fast_period(texts)
    for i, text in enumerate(texts):
        try:
            p = parse_period(text)
        except InputError:
            p = None
        assert taken[i] == (p is not None and not p.flags)
        if taken[i]:
            assert p is not None and p.start is not None and p.end is not None
            assert (first[i], last[i], unit[i]) == (p.start.isoformat(), p.end.isoformat(), p.precision)
    taken2, first2, last2, unit2 = fast_periods(texts, texts[::-1])
    for i, (a, b) in enumerate(zip(texts, texts[::-1], strict=True)):
        try:
            q = parse_period_columns(a, b)
        except InputError:
            q = None
        assert taken2[i] == (q is not None and not q.flags)
        if taken2[i]:
            assert q is not None and q.start is not None and q.end is not None
            assert (first2[i], last2[i], unit2[i]) == (q.start.isoformat(), q.end.isoformat(), q.precision)
