"""How the bytes of a text table become text: byte-order marks, UTF-16/32, UTF-8 line by line.

:func:`decode_table` is the one decoder of CSV / TSV tables and CSV gazetteers:

1. a byte-order mark names the encoding (UTF-8, UTF-16 or UTF-32, either byte order);
2. without one, a pattern of zero bytes tells UTF-16 and UTF-32 (as spreadsheets
   export "Unicode text") from 8-bit text;
3. other zero bytes mean the file is no text table (an Excel, Parquet or netCDF file
   under a text extension): refused, with what it looks like;
4. 8-bit text is checked as UTF-8 line by line: valid lines are UTF-8, the others
   were written in a legacy encoding and are read as Windows-1252 (cp1252, which is
   Latin-1 with printable characters in 0x80-0x9F). A file that mixes the two (a
   table merged from several sources) is read each line as it was written, with a
   :class:`~envlink.errors.TableWarning` naming the legacy lines, so nothing is
   silently garbled.
"""

from __future__ import annotations

import codecs
import os

from envlink.errors import InputError, TableWarning, warn

__all__ = ["decode_table", "detect_encoding", "LEGACY_ENCODING"]

#: The legacy 8-bit encoding of lines that are not UTF-8.
LEGACY_ENCODING = "cp1252"

_BOMS = (  # UTF-32 first: its little-endian mark starts like UTF-16's
    (codecs.BOM_UTF32_LE, "utf-32-le"),
    (codecs.BOM_UTF32_BE, "utf-32-be"),
    (codecs.BOM_UTF8, "utf-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le"),
    (codecs.BOM_UTF16_BE, "utf-16-be"),
)

#: Latin-1 text -> Windows-1252 text: the five bytes cp1252 leaves undefined keep Latin-1's meaning.
_CP1252 = {
    0x80 + i: ch for i, ch in enumerate(bytes(range(0x80, 0xA0)).decode("cp1252", "replace"))
    if ch != "\ufffd"
}

_MAGIC = (
    (b"PK\x03\x04", "a ZIP archive (an Excel .xlsx workbook is one): give it the .xlsx extension"),
    (b"\xd0\xcf\x11\xe0", "an old Excel .xls workbook: give it the .xls extension"),
    (b"PAR1", "a Parquet file: give it the .parquet extension"),
    (b"\x89HDF", "a netCDF-4 / HDF5 file, a grid rather than a table"),
    (b"CDF\x01", "a netCDF file, a grid rather than a table"),
    (b"CDF\x02", "a netCDF file, a grid rather than a table"),
    (b"\x1f\x8b", "a gzip-compressed file: decompress it first"),
    (b"%PDF", "a PDF document"),
)


def _names(encoding: str) -> str:
    return {"utf-8": "UTF-8", "utf-16-le": "UTF-16 (little-endian)", "utf-16-be": "UTF-16 (big-endian)",
            "utf-32-le": "UTF-32 (little-endian)", "utf-32-be": "UTF-32 (big-endian)"}.get(encoding, encoding)


def _wide(raw: bytes) -> str | None:
    """UTF-16 or UTF-32 text without a byte-order mark, told by where its zero bytes fall."""
    head = raw[:4096]
    n = len(head)
    if n < 4 or b"\x00" not in head:
        return None
    for width, enc in ((4, "utf-32"), (2, "utf-16")):
        usable = n - n % width
        if not usable:
            continue
        units = [head[i:i + width] for i in range(0, usable, width)]
        ascii_le = sum(u[0] != 0 and not any(u[1:]) for u in units)
        ascii_be = sum(u[-1] != 0 and not any(u[:-1]) for u in units)
        if ascii_le >= 0.6 * len(units):
            return f"{enc}-le"
        if ascii_be >= 0.6 * len(units):
            return f"{enc}-be"
    return None


def detect_encoding(raw: bytes) -> tuple[str, int]:
    """The encoding of a text table's bytes and the length of its byte-order mark.

    Returns ``("8bit", 0)`` for text in UTF-8 and/or a legacy 8-bit encoding (told
    apart line by line by :func:`decode_table`), and ``("binary", 0)`` for bytes
    that are no text.

    Examples
    --------
    >>> detect_encoding("a,b\\n".encode("utf-16"))[0] in ("utf-16-le", "utf-16-be")
    True
    >>> detect_encoding("a,b\\n".encode("utf-16-be")), detect_encoding(b"a,b\\n")
    (('utf-16-be', 0), ('8bit', 0))
    >>> detect_encoding(b"\\xef\\xbb\\xbfa,b\\n")
    ('utf-8', 3)
    """
    for bom, enc in _BOMS:
        if raw.startswith(bom):
            return enc, len(bom)
    wide = _wide(raw)
    if wide is not None:
        return wide, 0
    return ("binary" if b"\x00" in raw else "8bit"), 0


def _legacy(line: bytes) -> str:
    return line.decode("latin-1").translate(_CP1252)


def _lines_text(numbers: list[int]) -> str:
    shown = ", ".join(str(n) for n in numbers[:8])
    more = f" and {len(numbers) - 8} more" if len(numbers) > 8 else ""
    return ("line " if len(numbers) == 1 else "lines ") + shown + more


def _eight_bit(raw: bytes, label: str) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        pass
    lines = raw.splitlines(keepends=True)
    texts: list[str] = []
    legacy: list[int] = []
    utf8_multibyte = False
    for number, line in enumerate(lines, start=1):
        try:
            text = line.decode("utf-8")
        except UnicodeDecodeError:
            legacy.append(number)
            texts.append(_legacy(line))
            continue
        utf8_multibyte = utf8_multibyte or not text.isascii()
        texts.append(text)
    if utf8_multibyte:  # both kinds of line: a table merged from several sources
        are, were = ("is", "was") if len(legacy) == 1 else ("are", "were")
        warn(
            f"Table {label} mixes encodings: {_lines_text(legacy)} {are} not UTF-8 and {were} read "
            f"as Windows-1252 ({LEGACY_ENCODING}), the other lines as UTF-8; check the accented "
            "names there, and save the file as UTF-8 to silence this warning.",
            TableWarning,
        )
    return "".join(texts)


def decode_table(raw: bytes, path: str | os.PathLike[str]) -> str:
    """The text of a CSV / TSV table's bytes, each line decoded as it was written.

    Parameters
    ----------
    raw : bytes
        The file's bytes.
    path : path-like
        The file, for messages.

    Returns
    -------
    str
        The text, without a byte-order mark.

    Raises
    ------
    InputError
        Bytes that are no text (the message says what the file looks like), or
        UTF-16 / UTF-32 text that cannot be decoded (named as such).

    Warns
    -----
    TableWarning
        When UTF-8 lines and lines in a legacy encoding are mixed (the lines are named).

    Examples
    --------
    >>> decode_table("reef,lat\\nRécif,-8.5\\n".encode("utf-16"), "t.csv")
    'reef,lat\\nRécif,-8.5\\n'
    >>> decode_table("reef\\nRécif\\n".encode("cp1252"), "t.csv")
    'reef\\nRécif\\n'
    """
    label = repr(str(path))
    encoding, skip = detect_encoding(raw)
    if encoding == "8bit" and any(raw.startswith(magic) for magic, _ in _MAGIC):
        encoding = "binary"
    if encoding == "8bit":
        return _eight_bit(raw, label)
    if encoding == "binary":
        looks = next((what for magic, what in _MAGIC if raw.startswith(magic)), None)
        raise InputError(
            f"Cannot read table {label}: it is not a text table"
            + (f"; it looks like {looks}." if looks else "; is it the file you meant?")
        )
    try:
        return raw[skip:].decode(encoding)
    except UnicodeDecodeError as exc:
        raise InputError(
            f"Cannot read table {label}: it is {_names(encoding)} text, but the bytes at offset "
            f"{exc.start + skip} cannot be decoded as {_names(encoding)} ({exc.reason}); save it "
            "again as UTF-8 (CSV UTF-8 in a spreadsheet)."
        ) from None
