"""Reading and writing user tables (CSV, TSV, Parquet, Excel) with clear errors.

Every stage meets the outside world through these functions, so encodings,
extensions, text cells and atomic writes are handled once:

- :mod:`envlink.tables.read`: :func:`read_table`, :func:`read_table_as_written`;
- :mod:`envlink.tables.write`: :func:`write_table`, :func:`check_output_path`,
  :func:`check_cells_writable`;
- :mod:`envlink.tables.csvtext`: :func:`write_csv` (pandas' CSV bytes, built with Arrow);
- :mod:`envlink.tables.xlsx`: the one Excel sheet writer of envlink (typed cells; a text
  starting with ``=`` stays text, never a formula), for :func:`write_table` and the
  ``xlsx`` export format;
- :mod:`envlink.tables.encoding`: how a CSV file's bytes become text (:func:`decode_table`);
- :mod:`envlink.tables.header`: header cells (blank ones named, duplicates refused);
- :mod:`envlink.tables.cells`: numbers and labels in text cells (:func:`cell_text`,
  :func:`parse_numbers`, :func:`number_columns`, :func:`label_text`) and
  :func:`require_columns`.
"""

from __future__ import annotations

from envlink.tables.cells import (
    MISSING_WORDS,
    cell_text,
    label_text,
    number_columns,
    parse_numbers,
    require_columns,
)
from envlink.tables.csvtext import write_csv
from envlink.tables.read import TABLE_SUFFIXES, read_table, read_table_as_written
from envlink.tables.write import check_cells_writable, check_output_path, write_table

__all__ = [
    "read_table",
    "read_table_as_written",
    "write_table",
    "write_csv",
    "check_output_path",
    "check_cells_writable",
    "require_columns",
    "cell_text",
    "parse_numbers",
    "number_columns",
    "label_text",
    "MISSING_WORDS",
    "TABLE_SUFFIXES",
]
