"""Table I/O: encodings, delimiters, atomic writes, clear errors."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from envlink.errors import InputError, TableWarning
from envlink.tables import (
    cell_text,
    check_output_path,
    label_text,
    number_columns,
    parse_numbers,
    read_table,
    read_table_as_written,
    require_columns,
    write_table,
)


@pytest.mark.parametrize(
    "encoding,prefix",
    [("utf-8", b""), ("utf-8", b"\xef\xbb\xbf"), ("latin-1", b"")],
)
def test_reads_utf8_bom_and_latin1(tmp_path, encoding, prefix) -> None:
    # "Récif Nord" must survive every encoding byte-for-byte (common practice:
    # spreadsheets export UTF-8 with BOM or Windows Latin-1).
    p = tmp_path / "t.csv"
    p.write_bytes(prefix + "site,lat\nRécif Nord,12°30′S\n".encode(encoding, errors="strict")
                  if encoding == "utf-8" else prefix + "site,lat\nRécif Nord,12.5S\n".encode(encoding))
    df = read_table(p, as_text=True)
    assert list(df.columns) == ["site", "lat"]
    assert df.loc[0, "site"] == "Récif Nord"


def test_semicolon_csv_keeps_comma_decimals_as_text(tmp_path) -> None:
    p = tmp_path / "t.csv"
    p.write_text("lat;lon\n-3,75;140,2\n", encoding="utf-8")
    df = read_table(p, as_text=True)
    assert df.loc[0, "lat"] == "-3,75" and df.loc[0, "lon"] == "140,2"


def test_missing_file_names_path(tmp_path) -> None:
    with pytest.raises(InputError, match=r"no such file"):
        read_table(tmp_path / "nope.csv")


def test_unknown_extension(tmp_path) -> None:
    p = tmp_path / "t.dat"
    p.write_text("x")
    with pytest.raises(InputError, match=r"unknown extension '\.dat'"):
        read_table(p)


def test_require_columns_did_you_mean() -> None:
    with pytest.raises(InputError, match=r"no column 'latitud'\. Did you mean 'latitude'\?"):
        require_columns(pd.DataFrame({"latitude": [1.0]}), ["latitud"])


def test_write_refuses_overwrite_without_force(tmp_path) -> None:
    p = tmp_path / "o.csv"
    write_table(pd.DataFrame({"a": [1]}), p)
    with pytest.raises(InputError, match=r"pass force=True to overwrite it"):
        write_table(pd.DataFrame({"a": [2]}), p, force=False)
    assert pd.read_csv(p)["a"].tolist() == [1]


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_duplicate_column_names_are_an_error_not_renamed(tmp_path, suffix) -> None:
    # pandas would silently rename the second 'lat' to 'lat.1', changing a user column.
    p = tmp_path / f"t{suffix}"
    if suffix == ".csv":
        p.write_text("lat,lon,lat\n1,2,3\n")
    else:
        pd.DataFrame([[1, 2, 3]], columns=["lat", "lon", "lat"]).to_excel(p, index=False)
    with pytest.raises(InputError, match=r"columns 1 and 3 are both named 'lat'.*rename one"):
        read_table(p, as_text=True)


def test_blank_header_cells_are_named_not_duplicates(tmp_path) -> None:
    p = tmp_path / "t.csv"
    p.write_text("a,,\n1,,\n")
    with pytest.warns(TableWarning, match=r"columns 2, 3 have blank header cells; they are read as "
                                          r"'column_2', 'column_3'"):
        t = read_table(p, as_text=True)
    assert t.columns.tolist() == ["a", "column_2", "column_3"]


def test_empty_file_says_empty(tmp_path) -> None:
    p = tmp_path / "t.csv"
    p.write_text("\n")
    with pytest.raises(InputError, match=r"the file is empty; expected a header row"):
        read_table(p)


def test_parquet_as_text_writes_whole_floats_without_decimals(tmp_path) -> None:
    # A year column stored as float64 (NaN forces float) must read as '2001', not '2001.0'.
    p = tmp_path / "t.parquet"
    pd.DataFrame({"year": [2001.0, float("nan")], "lat": [-8.25, 1.0],
                  "when": [pd.Timestamp("2004-02-15"), pd.Timestamp("2004-02-16 12:00")]}).to_parquet(p)
    df = read_table(p, as_text=True)
    assert df["year"].tolist() == ["2001", ""]
    assert df["lat"].tolist() == ["-8.25", "1"]
    assert df["when"].tolist() == ["2004-02-15", "2004-02-16T12:00:00"]


def test_read_table_as_written_keeps_parquet_types(tmp_path) -> None:
    p = tmp_path / "t.parquet"
    pd.DataFrame({"n": [1, 2], "x": [0.5, 1.5]}).to_parquet(p)
    df = read_table_as_written(p)
    assert str(df["n"].dtype) == "int64" and str(df["x"].dtype) == "float64"
    c = tmp_path / "t.csv"
    c.write_text("n\n007\n")
    assert read_table_as_written(c)["n"].tolist() == ["007"]


def test_write_to_a_folder_names_it(tmp_path) -> None:
    (tmp_path / "out.csv").mkdir()
    with pytest.raises(InputError, match=r"it is a folder; give a file name inside it"):
        write_table(pd.DataFrame({"a": [1]}), tmp_path / "out.csv")


def test_write_failure_hides_temporary_name(tmp_path, monkeypatch) -> None:
    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied", str(tmp_path / ".o.csv.x.part"))

    monkeypatch.setattr(pd.DataFrame, "to_csv", refuse)
    with pytest.raises(InputError) as info:
        write_table(pd.DataFrame({"a": [1]}), tmp_path / "o.csv")
    msg = str(info.value)
    assert "cannot create a file in" in msg and "Permission denied" in msg and ".part" not in msg


def test_cell_text_forms() -> None:
    assert [cell_text(v) for v in (None, pd.NA, pd.NaT, 3, 2.0, 1e20, -0.125, True)] == [
        "", "", "", "3", "2", "1e+20", "-0.125", "True"]


def test_parse_numbers_decimal_commas_only_when_unambiguous() -> None:
    # '1,234' alone could be a thousands separator: not guessed (flagged unreadable);
    # beside '12,5' the column clearly uses decimal commas.
    v, bad = parse_numbers(pd.Series(["1,234", "7"]))
    assert bad.tolist() == [True, False] and v[1] == 7.0
    v, bad = parse_numbers(pd.Series(["1,234", "12,5", "\u22120,5", " 3\u00a0"]))
    assert v.tolist() == [1.234, 12.5, -0.5, 3.0] and not bad.any()
    v, bad = parse_numbers(pd.Series([1.5, None]))
    assert np.isnan(v[1]) and not bad.any()


def test_excel_output_names_a_control_character(tmp_path) -> None:
    # XML 1.0 (section 2.2, Char) excludes most C0 controls, so .xlsx cannot hold them;
    # a vertical tab pasted from a PDF is the usual one.
    df = pd.DataFrame({"site": ["ok", "bad\x0bchar"]})
    with pytest.raises(InputError, match=r"row 2, column 'site' holds the control character U\+000B"):
        write_table(df, tmp_path / "o.xlsx")
    assert not (tmp_path / "o.xlsx").exists()
    write_table(df, tmp_path / "o.csv")  # other formats are fine


def test_ragged_csv_names_the_line_and_the_likely_cause(tmp_path) -> None:
    # a decimal comma in a comma-separated file splits a cell in two
    p = tmp_path / "t.csv"
    p.write_text("lat,lon,year\n-8.5,-117.2,2001\n-8,5,-117.2,2001\n")
    with pytest.raises(InputError, match=r"line 3 has 4 cells but the header has 3\. .*decimal commas"):
        read_table(p, as_text=True)
    q = tmp_path / "q.csv"
    q.write_text('lat,lon\n1,2\n"3,4\n')
    with pytest.raises(InputError, match=r"a double quote opened on line 3 is never closed"):
        read_table(q, as_text=True)


def test_check_output_path_probes_the_folder(tmp_path, monkeypatch) -> None:
    import tempfile

    def refuse(*args, **kwargs):
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    with pytest.raises(InputError, match=r"cannot create a file in '.*' \(Operation not permitted\)"):
        check_output_path(tmp_path / "new" / "o.csv")
    assert not (tmp_path / "new").exists()  # the check creates nothing


def test_require_columns_on_a_table_without_columns() -> None:
    with pytest.raises(InputError, match=r"no column 'lat': it has no columns at all \(an empty file or sheet"):
        require_columns(pd.DataFrame(), ["lat"])


@pytest.mark.parametrize("newline", ["\r", "\r\n", "\n"])
def test_every_line_ending_is_read(tmp_path, newline) -> None:
    # classic Mac (CR), Windows (CRLF) and Unix (LF) line endings (common practice)
    p = tmp_path / "t.csv"
    p.write_bytes(newline.join(["lat;lon", "-8,5;-117,2", "-8,6;-117,3", ""]).encode())
    df = read_table(p, as_text=True)
    assert list(df.columns) == ["lat", "lon"] and df["lat"].tolist() == ["-8,5", "-8,6"]


def test_quoted_header_with_a_line_break(tmp_path) -> None:
    p = tmp_path / "t.csv"
    p.write_text('"site\nname",lat\nA,1\n')
    assert list(read_table(p, as_text=True).columns) == ["site\nname", "lat"]


def test_parse_numbers_a_word_with_a_dot_does_not_hide_decimal_commas() -> None:
    # common practice: 'approx. 5' is a note, not a number written with a decimal point
    v, bad = parse_numbers(pd.Series(["9,9", "approx. 5", "12,25", ""]))
    assert v[0] == 9.9 and v[2] == 12.25 and bad.tolist() == [False, True, False, False]
    v, bad = parse_numbers(pd.Series(["1.5", "2,5"]))  # a '.' number: commas stay unread
    assert v[0] == 1.5 and bad.tolist() == [False, True]


def test_number_columns_reads_text_numbers_and_names_bad_cells() -> None:
    t = pd.DataFrame({"depth": ["9,9", "\u22123", "", "12"], "zone": ["reef", "flat", "", "reef"],
                      "es": ["x", "y", "", "z"]})
    got = number_columns(t, ["depth", "zone", "depth"])
    assert list(got) == ["depth"] and got["depth"].dtype == np.float64
    np.testing.assert_array_equal(got["depth"], [9.9, -3.0, np.nan, 12.0])
    t.loc[1, "depth"] = "approx. 5"
    with pytest.raises(InputError, match=r"^--moderators: the column 'depth' holds numbers, but "
                       r"row 2 'approx\. 5' is not a number\. .*; write C\(depth\) if"):
        number_columns(t, ["depth"], where="--moderators", hint="write C({col}) if it is a category")
    with pytest.raises(InputError, match=r"'es' must hold numbers, but row 1 'x', row 2 'y', "
                       r"row 4 'z' are not a number\. Write a number or leave the cell blank\.$"):
        number_columns(t, ["es"], numbers=["es"], hint="write C({col})")


def test_check_output_path_other_suffixes(tmp_path) -> None:
    assert check_output_path(tmp_path / "fit.JSON", suffixes=(".json",)).name == "fit.JSON"
    with pytest.raises(InputError, match=r"no extension; expected \.json\.$"):
        check_output_path(tmp_path / "fit", suffixes=(".json",))
    with pytest.raises(InputError, match=r"it is a folder; .*result\.json'"):
        check_output_path(tmp_path, suffixes=(".json",))
    with pytest.raises(InputError, match=r"unknown extension '\.json'; expected \.csv"):
        check_output_path(tmp_path / "t.json")


def test_label_text_white_space_is_not_a_label() -> None:
    got = label_text(pd.Series([" reef\u00a0 flat ", "reef flat", "\u200b", None, "lagoon"], dtype="string"))
    assert got.tolist() == ["reef flat", "reef flat", None, None, "lagoon"] and got.isna().sum() == 2
    typed = pd.Series([3, 4])
    assert label_text(typed) is typed  # numbers of a typed file stay as they are
