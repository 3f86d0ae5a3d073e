"""The export formats: one registry that every interface reads (API, project file, docs).

Each entry of :data:`EXPORT_FORMATS` names its writer (a function of
:mod:`envlink.export.files`, imported on first use, so reading the registry costs no
pandas or pyarrow import) and these facts in ``entry.info``:

- ``suffix``: the table file's suffix (``NAME`` + suffix);
- ``key``: the key of that file among the files written (``csv-bom`` writes the
  ``csv`` file, so the two cannot be chosen together);
- ``companions``: other files the writer puts beside it, as (key, file name) pairs
  (the CSV's Data Package descriptor ``datapackage.json``);
- ``needs``: the optional library the writer imports (None when none);
- ``case_insensitive_columns``: whether column names that differ only in case clash.

Names follow the registries' spelling policy (:mod:`envlink.core.registry`): ``CSV``
is ``csv``. A shapefile is refused (:data:`REFUSED_FORMATS` says why).

Examples
--------
>>> parse_formats(["GPKG", " csv", "csv"])
('csv', 'gpkg')
>>> sorted(output_paths(Path("out"), "vell", ["csv"]))
['csv', 'datapackage']
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from envlink.core.lazy import LazyFunction
from envlink.core.registry import Entry, Registry
from envlink.core.util import did_you_mean
from envlink.errors import InputError

__all__ = ["EXPORT_FORMATS", "DEFAULT_FORMATS", "REFUSED_FORMATS", "parse_formats", "output_paths"]

#: Table formats :func:`envlink.export_table` writes: name -> writer, with ``suffix``,
#: ``key``, ``companions``, ``needs`` and ``case_insensitive_columns`` facts.
EXPORT_FORMATS: Registry[Callable[..., Any]] = Registry("format", param="formats", caller="export_table")


def _format(name: str, summary: str, *, writer: str, suffix: str, needs: str | None = None,
            companions: tuple[tuple[str, str], ...] = (), case_insensitive_columns: bool = False,
            aliases: tuple[str, ...] = (), key: str | None = None) -> None:
    EXPORT_FORMATS.add(Entry(
        name, summary, obj=LazyFunction(f"envlink.export.{writer}"), aliases=aliases,
        info={"suffix": suffix, "needs": needs, "companions": companions, "key": key or name,
              "case_insensitive_columns": case_insensitive_columns},
    ))  # fmt: skip


_format("csv", "`NAME.csv` (UTF-8, the text of the input columns as written) with its Frictionless "
        "Data Package descriptor `datapackage.json` (field types, units, descriptions, provenance)",
        writer="files:write_csv", suffix=".csv", companions=(("datapackage", "datapackage.json"),))
_format("csv-bom", "`csv` written as UTF-8 with a byte-order mark, so that spreadsheet programs "
        "(Excel) read accents and symbols right; instead of `csv`", writer="files:write_csv_bom",
        suffix=".csv", companions=(("datapackage", "datapackage.json"),), aliases=("csv-excel",), key="csv")
_format("parquet", "`NAME.parquet` (Apache Parquet), typed columns, with the same descriptor in its "
        "schema metadata; needs pyarrow", writer="files:write_parquet", suffix=".parquet", needs="pyarrow")
_format("gpkg", "`NAME.gpkg` (OGC GeoPackage, EPSG:4326): layer `NAME`, a point per row; layer "
        "`NAME_regions`, the region polygons; typed columns, units and descriptions in "
        "`gpkg_data_columns`", writer="gpkg:write_gpkg", suffix=".gpkg", needs="pyogrio",
        case_insensitive_columns=True)
_format("xlsx", "`NAME.xlsx` (Excel workbook): typed cells (numbers, dates, true/false), a `columns` "
        "sheet with units and descriptions, a `provenance` sheet; needs openpyxl",
        writer="xlsx:write_xlsx", suffix=".xlsx", needs="openpyxl")

#: What :func:`envlink.export_table` and a project file write when no formats are given.
DEFAULT_FORMATS: tuple[str, ...] = ("csv", "parquet", "gpkg")

#: Formats refused, with the reason and the way out (names compared in the registry's spelling).
REFUSED_FORMATS: dict[str, str] = dict.fromkeys(
    ("shp", "shapefile", "esri-shapefile"),
    "a shapefile cuts column names to 10 characters, has no date-time or missing-number "
    "values and holds one geometry type, so it would lose columns and values of the table; "
    "write 'gpkg' instead (QGIS, ArcGIS, R's sf and GDAL read GeoPackages)",
)


def _spelling(text: str) -> str:
    return "".join(str(text).lower().replace("_", "-").split())


def _key(name: str) -> str:
    """The key of a format's table file (its name, unless it writes another format's file)."""
    return str(EXPORT_FORMATS[name].info.get("key", EXPORT_FORMATS[name].name))


def parse_formats(formats: str | Sequence[str], caller: str = "export_table") -> tuple[str, ...]:
    """Canonical format names (any spelling accepted), each once, in the registry's order.

    Raises
    ------
    InputError
        A name that is not a format, with a did-you-mean; a refused format (a
        shapefile), with the reason; two formats that write the same file.
    """
    if isinstance(formats, str):
        formats = (formats,)
    names = []
    for f in formats:
        if _spelling(f) in REFUSED_FORMATS:
            raise InputError(f"The 'formats' parameter of {caller} cannot be {f!r}: {REFUSED_FORMATS[_spelling(f)]}.")
        if not EXPORT_FORMATS.accepts(f):
            raise InputError(
                f"The 'formats' parameter of {caller} must be a list of {EXPORT_FORMATS.help_text()}; "
                f"got {f!r}.{did_you_mean(str(f), EXPORT_FORMATS.names())}"
            )
        names.append(EXPORT_FORMATS.parse(f).name)
    chosen = tuple(n for n in EXPORT_FORMATS.names() if n in names)
    files = [_key(n) for n in chosen]
    for n in chosen:
        if files.count(_key(n)) > 1:
            both = [m for m in chosen if _key(m) == _key(n)]
            raise InputError(
                f"The 'formats' parameter of {caller} cannot be both {' and '.join(repr(m) for m in both)}: "
                "they write the same file; choose one."
            )
    return chosen


def output_paths(folder: Path, name: str, formats: Sequence[str], *, fit: bool = False) -> dict[str, Path]:
    """The files an export of ``formats`` writes in ``folder``, by key (``csv``, ``datapackage``...).

    ``fit`` adds ``fit_json`` and ``fit_text`` (``fit.json``, ``fit.txt``).
    """
    paths: dict[str, Path] = {}
    for f in parse_formats(formats):
        entry = EXPORT_FORMATS[f]
        paths[_key(f)] = folder / f"{name}{entry.info['suffix']}"
        paths.update({key: folder / file for key, file in entry.info["companions"]})
    if fit:
        paths.update(fit_json=folder / "fit.json", fit_text=folder / "fit.txt")
    return paths
