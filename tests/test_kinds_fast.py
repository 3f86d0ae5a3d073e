"""Column kinds found a column at once, and the export's text columns, equal the per-cell rules.

References: the per-cell rules of :func:`envlink.tables.kinds.text_kind` (one Python
test per cell, the rules docs/outputs.md states), applied to the same cells; pandas'
own ``DataFrame.to_csv(index=False)`` for the bytes of nullable integer and boolean
columns; the Gregorian calendar for which dates exist (ISO 8601: 2000-02-29 exists,
1900-02-29 does not).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from envlink.export.writers import _text_cells
from envlink.tables.csvtext import csv_bytes
from envlink.tables.kinds import column_kind, text_kind, typed_column, typed_frame
from envlink.tables.write import csv_line_end

pytest.importorskip("pyarrow")

COLUMNS = {
    "ints": ["12", "-3", "0", "-0", "", None, "  ", "9007199254740991"],
    "too_long_int": ["12", "9007199254740993"],  # beyond 2**53: an identifier
    "twenty_digits": ["1", "12345678901234567890"],
    "codes": ["007", "008", "12"],  # a leading zero: a code, text
    "floats": ["12.5", "3", ".5", "12.", "-0.5", "1e5", "1.5E-3", "-.25e+2", ""],
    "float_with_long_int": ["0.5", "90071992547409930"],
    "not_numbers": ["1,5", "2.0"],
    "nan_text": ["NaN", "1.0"],
    "inf_text": ["inf", "1.0"],
    "lead_zero_float": ["00.5", "1.0"],
    "dot_only": [".", "1"],
    "exp_only": ["e5", "1"],
    "plus": ["+1", "2"],
    "bools": ["true", "False", "TRUE", None, ""],
    "yes_no": ["yes", "no"],
    "dates": ["2000-02-29", "2011-06-15", "", None],
    "not_a_date": ["1900-02-29", "2011-06-15"],
    "month_13": ["2011-13-01"],
    "year_0": ["0000-01-01"],
    "datetime_text": ["2011-06-15T10:00"],
    "short_date": ["2011-6-15"],
    "blank": ["", "  ", None],
    "empty": [],
    "nbsp_blank": ["\u00a0", "\u2003", "12"],  # blank as str.strip sees it: integer
    "newline": ["12\n", "3"],
    "words": ["reef", "lagoon", "12"],
    "unicode_digits": ["\uff11\uff12", "3"],
}


@pytest.mark.parametrize("name", sorted(COLUMNS))
@pytest.mark.parametrize("dtype", [object, "string", "str"])
def test_column_kind_of_text_equals_the_per_cell_rules(name: str, dtype: object) -> None:
    cells = COLUMNS[name]
    s = pd.Series(cells, dtype=dtype)
    assert column_kind(s) == text_kind(cells)
    kind = text_kind(cells)
    typed = typed_frame(pd.DataFrame({"c": s}))["c"]
    pd.testing.assert_series_equal(typed, s if kind == "string" else typed_column(s, kind), check_names=False)


def test_known_kinds() -> None:
    # the rules of docs/outputs.md, by hand
    expected = {"ints": "integer", "too_long_int": "string", "codes": "string", "floats": "number",
                "float_with_long_int": "string", "not_numbers": "string", "bools": "boolean",
                "dates": "date", "not_a_date": "string", "blank": "string", "nbsp_blank": "integer"}
    for name, kind in expected.items():
        assert column_kind(pd.Series(COLUMNS[name], dtype=object)) == kind, name


_CELL = st.one_of(
    st.from_regex(r"-?[0-9]{1,20}", fullmatch=True),
    st.from_regex(r"-?[0-9]{0,4}\.?[0-9]{0,4}(?:[eE][+-]?[0-9]{1,3})?", fullmatch=True),
    st.from_regex(r"[0-9]{4}-[0-9]{2}-[0-9]{2}", fullmatch=True),
    st.sampled_from(["", " ", "\t", "true", "False", "TRUE", "x", "1,5", "-"]),
    st.none(),
)


@settings(max_examples=300, deadline=None)
@given(st.lists(_CELL, min_size=0, max_size=12), st.sampled_from([object, "string"]))
def test_random_text_columns_have_the_per_cell_kind(cells: list[str | None], dtype: object) -> None:
    assert column_kind(pd.Series(cells, dtype=dtype)) == text_kind(cells)


def test_export_text_cells_equal_the_per_cell_reading() -> None:
    cells = ["a", "", None, "b,c", "x\ry", np.nan, pd.NA, "  "]
    for s in (pd.Series(cells, dtype=object), pd.Series(cells, dtype="string")):
        got = _text_cells(s).tolist()
        assert got == ["a", None, None, "b,c", "x\ry", None, None, "  "]
        assert csv_line_end(pd.DataFrame({"c": s})) == "\r\n"
    mixed = pd.Series(["a", 3, 2.5, None], dtype=object)  # not text: one by one, as before
    assert _text_cells(mixed).tolist() == ["a", "3", "2.5", None]
    assert csv_line_end(pd.DataFrame({"c": ["a", None], "d": ["b", "c"]})) == "\n"


def test_nullable_integer_and_boolean_columns_written_as_pandas_writes_them() -> None:
    t = pd.DataFrame({
        "n": pd.array([3, None, -12, 0], dtype="Int64"),
        "ok": pd.array([True, None, False, True], dtype="boolean"),
        "x": [0.5, 1.0, float("nan"), 1e-5],
        "last": pd.array([None, 7, 8, 9], dtype="Int64"),
    })
    assert csv_bytes(t, lineterminator="\n") == t.to_csv(index=False, lineterminator="\n").encode()
