"""Fast table reading and writing give what the slow paths gave, byte for byte.

References: pandas' own ``DataFrame.to_csv(index=False)`` (the writer envlink used
before, and whose bytes the outputs keep), and the per-cell number reading of envlink
0.1 (kept below as ``_per_cell_numbers``), on the demo's table and on random tables.
"""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from envlink.core.util import INVISIBLE_CHARS
from envlink.tables import MISSING_WORDS, cell_text, parse_numbers
from envlink.tables.csvtext import csv_bytes, write_csv

pytest.importorskip("pyarrow")
_MINUS = dict.fromkeys(map(ord, "\u2212\u2010\u2011\u2012\u2013\ufe63\uff0d"), "-")


def _per_cell_numbers(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """parse_numbers as envlink 0.1 wrote it (every cell through Python)."""
    if pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values):
        return pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan), np.zeros(
            len(values), dtype=bool)
    text = pd.Series([cell_text(v) for v in values.tolist()], index=values.index, dtype="string")
    text = text.map(lambda v: unicodedata.normalize("NFKC", v).translate(INVISIBLE_CHARS).translate(_MINUS).strip())
    text = text.where(~text.str.lower().isin(MISSING_WORDS), "")
    comma = text.str.fullmatch(r"[+-]?\d*,\d+")
    dotted = text.str.contains(".", regex=False) & pd.to_numeric(text.where(text != "", None), errors="coerce").notna()
    if comma.any() and not dotted.any():
        decimals = text[comma].str.split(",").str[-1].str.len()
        if (decimals != 3).any():
            text = text.str.replace(",", ".", regex=False)
    number = pd.to_numeric(text.where(text != "", None), errors="coerce")
    out = number.to_numpy(dtype=np.float64, na_value=np.nan)
    return out, (text != "").to_numpy(dtype=bool) & np.isnan(out)


_PIECES = ["1", "-2.5", "12,5", "1,234", " 7 ", "\u22123", "\uff13", "n/a", "NaN", "", "abc", "approx. 5",
           "1e5", "+.5", "5.", "inf", "-", "3\u00a0", "\u200b4", "0x10", "1_000", "٣", "2,50", "--", "?"]


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(st.sampled_from(_PIECES), st.text(max_size=6),
                          st.floats(allow_nan=True).map(repr)), min_size=1, max_size=12))
def test_numbers_read_as_the_per_cell_reading_did(cells: list[str]) -> None:
    got, bad = parse_numbers(pd.Series(cells, dtype="str"))
    ref, ref_bad = _per_cell_numbers(pd.Series(cells, dtype="str"))
    np.testing.assert_array_equal(got, ref)
    np.testing.assert_array_equal(bad, ref_bad)


def test_numbers_of_a_located_column_and_of_object_cells() -> None:
    rng = np.random.default_rng(3)
    cells = pd.Series(np.round(rng.uniform(-90, 90, 5000), rng.integers(0, 9)).astype(str), dtype="str")
    np.testing.assert_array_equal(parse_numbers(cells)[0], _per_cell_numbers(cells)[0])
    mixed = pd.Series([1, 2.5, None, "3,5", pd.Timestamp("2004-02-15"), float("nan"), "x"], dtype=object)
    for a, b in zip(parse_numbers(mixed), _per_cell_numbers(mixed), strict=True):
        np.testing.assert_array_equal(a, b)


def _random_table(rng: np.random.Generator, n: int) -> pd.DataFrame:
    floats = rng.standard_normal(n) * 10.0 ** rng.integers(-12, 20, n)
    floats[rng.random(n) < 0.1] = np.nan
    specials = np.array([0.0, -0.0, 1e15, 1e16, 1e-4, 9.999e-5, np.inf, -np.inf, 123456789012.5, 1e14, 5e-324])
    floats[: min(n, specials.size)] = specials[:n]
    words = np.array(["", "a", 'say "hi"', "x,y", "line\nbreak", "cr\rhere", " pad ", "tab\there", "é", None],
                     dtype=object)
    return pd.DataFrame({
        "f": floats, "whole": np.round(rng.uniform(-1e6, 1e6, n)), "coverage": np.where(rng.random(n) < .9, 1.0, .5),
        "cell": np.round(rng.uniform(-30, 30, n) * 4) / 4 + 0.125, "f32": rng.standard_normal(n).astype(np.float32)
        .astype(np.float64), "i": rng.integers(-5, 5, n), "b": rng.random(n) < 0.5,
        "obj": words[rng.integers(0, words.size, n)], "s": pd.array(words[rng.integers(0, words.size, n)],
                                                                     dtype="string"),
        "str": pd.Series(words[rng.integers(0, words.size - 1, n)]).astype("str"),
    })


@pytest.mark.parametrize("sep", [",", "\t"])
def test_csv_bytes_equal_pandas_on_random_tables(sep: str) -> None:
    rng = np.random.default_rng(11)
    for n in (0, 1, 7, 5000, 20000):
        df = _random_table(rng, n)
        assert csv_bytes(df, sep, "\n") == df.to_csv(index=False, sep=sep, lineterminator="\n").encode(), n


def test_csv_bytes_equal_pandas_on_the_demo(tmp_path) -> None:
    from envlink.project import run_demo

    result = run_demo(tmp_path / "demo", progress=False)
    table = result.table
    assert csv_bytes(table, ",", "\n") == table.to_csv(index=False, lineterminator="\n").encode()
    written = (tmp_path / "demo" / "vell_enriched.csv").read_bytes()
    assert written.startswith(csv_bytes(table.iloc[:0], ",", "\n") or b"")


def test_tables_left_to_pandas_are_written_by_pandas(tmp_path) -> None:
    df = pd.DataFrame({"when": pd.to_datetime(["2004-02-15", None]), "n": pd.array([1, None], dtype="Int64")})
    assert csv_bytes(df) is None
    write_csv(df, tmp_path / "t.csv", lineterminator="\n")
    assert (tmp_path / "t.csv").read_bytes() == df.to_csv(index=False, lineterminator="\n").encode()
    one = pd.DataFrame({"a": ["", "x"]})  # one column: the csv module quotes a lone empty field
    write_csv(one, tmp_path / "o.csv", lineterminator="\n")
    assert (tmp_path / "o.csv").read_text() == 'a\n""\nx\n'


def test_a_decimal_comma_beside_decimal_points_is_explained() -> None:
    # a column mixing decimal marks is refused (common practice: one mark per column), and
    # the message says why the comma cell was not read
    import pandas as pd
    import pytest

    from envlink.errors import InputError
    from envlink.tables.cells import number_columns

    t = pd.DataFrame({"es": ["1.112", "0,45", "0.3"]})
    with pytest.raises(InputError, match=r"row 2 '0,45' is not a number \(other cells of the column "
                                         r"write decimals with a point"):
        number_columns(t, ["es"], numbers=["es"])
    t = pd.DataFrame({"es": ["12", "approx. 5"]})
    with pytest.raises(InputError) as info:
        number_columns(t, ["es"], numbers=["es"])
    assert "decimal mark" not in str(info.value)
