"""Window families of the scan: window dates for each anchor and unit, names, extraction.

Sources: the window rule of docs/inference.md (the S units ending L units before the
anchor, inclusive ISO dates) worked by hand in each case; extraction equals attach
over the same window written as the period (envlink's own attach, tested against
NumPy in tests/extract).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import envlink
from envlink.errors import InputError
from envlink.extract.family import ANCHORS, WindowFamily, extract_family, family_windows, read_steps
from envlink.testing import make_grid

T = pd.DataFrame({"period_start": ["2004-03-10", None], "period_end": ["2004-03-21", None]})


@pytest.mark.parametrize(("anchor", "lag", "span", "unit", "first", "last"), [
    ("start", 0, 1, "D", "2004-03-10", "2004-03-10"),
    ("start", 2, 3, "D", "2004-03-06", "2004-03-08"),
    ("end", 0, 7, "D", "2004-03-15", "2004-03-21"),
    ("mid", 1, 2, "D", "2004-03-13", "2004-03-14"),   # middle day of 10..21 is the 15th
    ("start", 0, 1, "M", "2004-03-01", "2004-03-31"),
    ("end", 1, 2, "M", "2004-01-01", "2004-02-29"),    # leap February
    ("start", 12, 3, "M", "2003-01-01", "2003-03-31"),  # March 2003 and the two before
])
def test_window_dates(anchor, lag, span, unit, first, last):
    a, b = family_windows(T, anchor, lag, span, unit)
    assert (a.iloc[0], b.iloc[0]) == (first, last)
    assert a.isna().iloc[1] and b.isna().iloc[1]


def test_family_names_and_spellings():
    f = WindowFamily.make(lags="0..6:3", spans=[1, 2], unit="months", anchors=["Start", "MIDDLE"],
                          stats=["mean", "Quantile:.9"])
    assert (f.lags, f.unit, f.anchors, f.stats) == ((0, 3, 6), "M", ("start", "mid"),
                                                     ("mean", "quantile:0.9"))
    assert len(f) == 24 and len(f.describe()) == 24
    assert f.describe().index[0] == "mean@start-lag0M-span1M"
    assert read_steps(5, "lags", low=0) == (5,)
    with pytest.raises(InputError, match="'lags' parameter of scan"):
        read_steps("3..1", "lags", low=0)
    with pytest.raises(InputError, match="'unit' parameter of scan"):
        WindowFamily.make(unit="Y")
    with pytest.raises(InputError, match="Did you mean 'start'"):
        WindowFamily.make(anchors=["strat"])
    assert ANCHORS.parse("middle").label() == "mid"


def test_extraction_equals_attach_over_the_window():
    g = make_grid(np.arange(96.0).reshape(24, 2, 2), lat=[0.5, 1.5], lon=[0.5, 1.5])
    t = pd.DataFrame({"site_lat": [0.5, 1.5], "site_lon": [0.5, 1.5],
                      "period_start": ["2001-03-05", "2001-07-20"],
                      "period_end": ["2001-03-25", "2001-08-02"]})
    f = WindowFamily.make(lags="0..1", spans="1..2", unit="M", stats=["mean", "max"])
    got = extract_family(t, g, f)
    assert list(got.columns) == list(f.describe().index)
    a, b = family_windows(t, "start", 1, 2, "M")
    ref = envlink.attach(t.assign(period_start=a, period_end=b), g, name="r", stat="max")
    np.testing.assert_allclose(got["max@start-lag1M-span2M"], ref["r"], rtol=1e-12)
