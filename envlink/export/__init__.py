"""Export: the enriched table with its schema and provenance (CSV + Data Package, Parquet, GeoPackage, Excel).

- :mod:`envlink.export.formats`: :data:`EXPORT_FORMATS`, the registry of formats (each
  with its writer, file suffix and the optional library it needs);
- :mod:`envlink.export.writers`: :func:`export_table`;
- :mod:`envlink.export.files` (CSV, Parquet), :mod:`envlink.export.gpkg` (GeoPackage),
  :mod:`envlink.export.xlsx` (Excel): the writer of each format;
- :mod:`envlink.export.schema`: the Table Schema of an enriched table and provenance helpers.

Names are loaded on first access, so reading the registry (as the project file's
schema does) imports neither pandas nor pyarrow.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from envlink.export.formats import DEFAULT_FORMATS, EXPORT_FORMATS
    from envlink.export.schema import file_sha256, software_versions, table_schema
    from envlink.export.writers import check_columns_exportable, export_table

#: public name -> module that defines it
_LAZY: dict[str, str] = {
    "export_table": "envlink.export.writers",
    "check_columns_exportable": "envlink.export.writers",
    "table_schema": "envlink.export.schema",
    "software_versions": "envlink.export.schema",
    "file_sha256": "envlink.export.schema",
    "EXPORT_FORMATS": "envlink.export.formats",
    "DEFAULT_FORMATS": "envlink.export.formats",
}

__all__ = ["export_table", "check_columns_exportable", "table_schema", "software_versions",
           "file_sha256", "EXPORT_FORMATS", "DEFAULT_FORMATS"]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'envlink.export' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
