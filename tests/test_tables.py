"""Table I/O: encodings, delimiters, atomic writes, clear errors."""

from __future__ import annotations

import pandas as pd
import pytest

from envlink.errors import InputError
from envlink.tables import read_table, require_columns, write_table


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
    with pytest.raises(InputError, match="--force"):
        write_table(pd.DataFrame({"a": [2]}), p, force=False)
    assert pd.read_csv(p)["a"].tolist() == [1]
