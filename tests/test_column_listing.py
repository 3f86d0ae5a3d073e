"""The "no column" message says when it lists only some of the table's columns."""

from __future__ import annotations

import pandas as pd
import pytest

from envlink.errors import InputError
from envlink.tables.cells import require_columns


def test_a_long_column_list_is_cut_at_20_and_says_so():
    wide = pd.DataFrame({f"c{i:02d}": [1] for i in range(25)})
    with pytest.raises(InputError, match=r"The first 20 of its 25 columns: 'c00', .*'c19'\.$"):
        require_columns(wide, ["latitude"])


def test_a_short_column_list_is_given_whole():
    with pytest.raises(InputError, match=r"Columns: 'a', 'b'\.$"):
        require_columns(pd.DataFrame({"a": [1], "b": [2]}), ["latitude"])
