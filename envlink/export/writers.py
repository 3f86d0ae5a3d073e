"""export_table: the enriched table with its schema and provenance, in every format asked for.

The formats are the entries of :data:`envlink.export.formats.EXPORT_FORMATS`; each
entry's writer (:mod:`envlink.export.files`, :mod:`~envlink.export.gpkg`,
:mod:`~envlink.export.xlsx`) writes its files. One call writes a set of files into
one folder:

- ``NAME.csv`` with a Frictionless Data Package descriptor ``datapackage.json`` beside
  it (field types, units, descriptions, the missing-value marker ``""`` and an
  ``envlink`` provenance section); format ``csv-bom`` writes the same CSV with a
  UTF-8 byte-order mark, for spreadsheets;
- ``NAME.parquet`` with typed columns, carrying the same descriptor in its schema
  metadata (key ``envlink``) and each field's description and unit in the field
  metadata;
- ``NAME.gpkg``: layer ``NAME``, one point per row at ``site_lat`` / ``site_lon``
  (an empty geometry where a row has no location), and layer ``NAME_regions`` with
  the region polygons of ``site_wkt`` (EPSG:4326); typed fields, units and
  descriptions in ``gpkg_data_columns`` (the geometry column is named ``geom`` and
  the feature id ``gpkg_fid`` where the table has a ``geometry`` / ``fid`` column of
  its own, so those keep their values);
- ``NAME.xlsx``: the table with typed cells, a ``columns`` sheet (types, units,
  descriptions) and a ``provenance`` sheet;
- ``fit.json`` (the meta-regression JSON contract) and ``fit.txt`` (its summary),
  when a fit is given.

Every input row and column is kept, in order, followed by the added columns. Types:
a column's own dtype, or for a text column the kind all its cells parse as
(:mod:`envlink.tables.kinds`: numbers written as text are numbers, ISO dates are
dates); the CSV keeps the text as written and its descriptor says how to read it.
Empty text cells are written as missing values in every format. Each file is
written to a temporary file beside its target and all of them are renamed into
place only after every one has been written, so an interrupted export leaves any
previous output as it was.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from envlink.core.outputs import check_output_paths
from envlink.core.util import atomic_group, atomic_path
from envlink.core.versions import software_versions
from envlink.errors import InputError
from envlink.export.files import is_missing
from envlink.export.formats import DEFAULT_FORMATS, EXPORT_FORMATS, output_paths, parse_formats
from envlink.export.schema import jsonable, table_schema
from envlink.tables.cells import cell_text
from envlink.tables.kinds import typed_column

__all__ = ["export_table", "check_columns_exportable"]

def _text_cells(s: pd.Series) -> pd.Series:
    """A column as text cells as written, ``None`` where missing or ``""`` (objects)."""
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
    except ImportError:  # pyarrow is an optional extra
        pa = None
    if pa is not None and (isinstance(s.dtype, pd.StringDtype) or (
            s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) in ("string", "empty"))):
        try:  # a column of text at once
            arr = pa.array(s, type=pa.string(), from_pandas=True)
            arr = pc.if_else(pc.equal(arr, ""), pa.scalar(None, pa.string()), arr)
            return pd.Series(arr.to_numpy(zero_copy_only=False), dtype=object)
        except (pa.ArrowException, TypeError, ValueError):  # odd cells: one by one
            pass
    # typed cells as every command writes them (a whole number without ".0", a midnight date as YYYY-MM-DD)
    text = [None if is_missing(v) or v == "" else cell_text(v) for v in s.tolist()]
    return pd.Series(text, dtype=object)


def _normalised(table: pd.DataFrame, schema: Mapping[str, Any]) -> pd.DataFrame:
    """Copy with plain columns: text as written ("" -> None), numbers as float64 or Int64,
    booleans, dates as ISO text. Typed writers type the text columns by the schema
    (:func:`envlink.tables.kinds.typed_column`); the CSV writes them as they are."""
    out: dict[str, pd.Series] = {}
    for field, col in zip(schema["fields"], table.columns, strict=True):
        s = table[col].reset_index(drop=True)
        kind, dtype = field["type"], s.dtype
        if pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
            out[str(col)] = typed_column(s, kind) if kind in ("number", "integer") else s
        elif kind == "date" and pd.api.types.is_datetime64_any_dtype(dtype):
            out[str(col)] = pd.Series(s.dt.strftime("%Y-%m-%d").tolist(), dtype=object).where(s.notna(), None)
        elif kind == "boolean" and not any(isinstance(v, str) for v in s.tolist()):
            flags = [None if is_missing(v) else bool(v) for v in s.tolist()]
            out[str(col)] = pd.Series(flags, dtype="boolean" if None in flags else bool)
        else:
            out[str(col)] = _text_cells(s)
    return pd.DataFrame(out, index=range(len(table)))


def _fit_json(fit: Any) -> str:
    return json.dumps(jsonable(fit.to_dict()), indent=2, ensure_ascii=False) + "\n"


def _fit_text(fit: Any) -> str:
    summary = fit.summary() if hasattr(fit, "summary") else fit
    return str(summary).rstrip("\n") + "\n"


def check_columns_exportable(columns: Sequence[object], formats: Sequence[str]) -> None:
    """Raise :class:`InputError` when the columns cannot all be written in ``formats``.

    GeoPackage (SQLite) column names are case-insensitive, so two columns that differ
    only in case (``fid`` / ``FID``) cannot both be kept there. Run it before a long
    pipeline so the problem shows at the start, not after the work.

    Examples
    --------
    >>> check_columns_exportable(["reef", "Reef"], ["csv"])
    >>> check_columns_exportable(["reef", "Reef"], ["csv", "gpkg"])
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The columns 'reef' and 'Reef' differ only in case, which a GeoPackage cannot hold...
    """
    if not any(EXPORT_FORMATS[f].info["case_insensitive_columns"] for f in parse_formats(formats)):
        return
    seen: dict[str, str] = {}
    for col in map(str, columns):
        key = col.lower()
        if key in seen:
            raise InputError(
                f"The columns {seen[key]!r} and {col!r} differ only in case, which a GeoPackage "
                "cannot hold (its column names ignore case); rename one, or leave 'gpkg' out of "
                "the export formats."
            )
        seen[key] = col


def _target(out: Path, name: str | None) -> tuple[Path, str]:
    """The output folder and file stem: a file path ending in a format's suffix names both."""
    if out.suffix.lower() in {e.info["suffix"] for e in EXPORT_FORMATS}:
        name = name or out.stem
        out = out.parent
    name = name or "enriched"
    if not re.fullmatch(r"[A-Za-z0-9._-]+", name):
        raise InputError(
            f"The 'name' parameter of export_table must be letters, digits, '.', '_' or '-'; "
            f"got {name!r}."
        )
    return out, name


def _split_provenance(table: pd.DataFrame, provenance: Mapping[str, Any] | None
                      ) -> tuple[dict[str, Any], dict[str, Any]]:
    """The provenance to record and each covariate's provenance (name -> mapping)."""
    prov = dict(provenance if provenance is not None else table.attrs.get("envlink", {}) or {})
    covariates = prov.get("covariates")
    if covariates is None:  # attach's own record: table.attrs["envlink"][name] per covariate
        covariates = {k: v for k, v in prov.items() if isinstance(v, Mapping)
                      and k in table.columns and f"{k}_flags" in table.columns}  # fmt: skip
        prov = {k: v for k, v in prov.items() if k not in covariates}
        prov["covariates"] = covariates
    return prov, covariates


def _descriptor(name: str, title: str | None, schema: Mapping[str, Any],
                envlink_section: Mapping[str, Any]) -> dict[str, Any]:
    """The Frictionless Data Package descriptor of the CSV, with the ``envlink`` section."""
    package_name = re.sub(r"[^a-z0-9._-]+", "-", name.lower()).strip("-") or "enriched"
    return {
        "profile": "tabular-data-package",
        "name": package_name,
        "title": title or f"{name}: enriched table written by envlink",
        "resources": [{
            "name": package_name, "path": f"{name}.csv", "profile": "tabular-data-resource",
            "format": "csv", "mediatype": "text/csv", "encoding": "utf-8",
            "dialect": {"delimiter": ",", "doubleQuote": True, "header": True},
            "schema": schema,
        }],  # fmt: skip
        "envlink": envlink_section,
    }


def export_table(
    table: pd.DataFrame,
    out: str | os.PathLike[str],
    *,
    formats: Sequence[str] = DEFAULT_FORMATS,
    name: str | None = None,
    fit: Any | None = None,
    provenance: Mapping[str, Any] | None = None,
    input_columns: Sequence[str] | None = None,
    descriptions: Mapping[str, str] | None = None,
    units: Mapping[str, str] | None = None,
    project_sha256: str | None = None,
    title: str | None = None,
    force: bool = False,
) -> dict[str, Path]:
    """Write the enriched table (and the fit) with schema and provenance.

    Parameters
    ----------
    table : pandas.DataFrame
        The enriched table: every input row and column, then the added columns.
    out : path-like
        Output folder; or a file path ending in ``.csv``, ``.parquet``, ``.gpkg`` or
        ``.xlsx``, whose folder and stem are then used.
    formats : sequence of {"csv", "csv-bom", "parquet", "gpkg", "xlsx"}
        Table formats to write (default ``csv``, ``parquet``, ``gpkg``), names of
        :data:`~envlink.export.formats.EXPORT_FORMATS` in any spelling (``CSV``).
        ``csv`` (or ``csv-bom``) always comes with ``datapackage.json``; a shapefile
        is refused with the reason.
    name : str, optional
        File stem (default ``"enriched"``, or the stem of ``out``).
    fit : fitted meta-regression, optional
        Anything with ``to_dict()`` and ``summary()``; written as ``fit.json`` and ``fit.txt``.
    provenance : mapping, optional
        Recorded under ``envlink`` in the descriptor. Default ``table.attrs["envlink"]``
        (where :func:`envlink.attach` keeps each covariate's provenance under its name).
        Its ``covariates`` entry (name -> provenance with ``units``, ``stat``,
        ``window``, ``spatial``, ``grid``) describes the covariate columns; without one,
        entries named after a covariate column are taken as its provenance.
    input_columns : sequence of str, optional
        The user's own columns, described as such in the schema.
    descriptions, units : mapping, optional
        Per-column description and unit overrides.
    project_sha256 : str, optional
        SHA-256 of the project file, recorded in the provenance.
    title : str, optional
        Title of the data package.
    force : bool, default False
        Overwrite existing outputs. Without it an existing output is an :class:`InputError`.

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``csv``, ``datapackage``, ``parquet``, ``gpkg``, ``xlsx``, ``fit_json``,
        ``fit_text`` for the files written.

    Raises
    ------
    InputError
        A bad format name, an existing output without ``force``, or a table that
        cannot be written (the message says which file and why).

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> t = pd.DataFrame({"reef": ["Pell Bommie"], "site_lat": [-9.1], "site_lon": [-117.2]})
    >>> paths = export_table(t, tempfile.mkdtemp(), formats=["csv"])
    >>> sorted(paths)
    ['csv', 'datapackage']
    """
    formats = parse_formats(formats)
    check_columns_exportable(list(table.columns), formats)
    target, name = _target(Path(out), name)
    paths = output_paths(target, name, formats, fit=fit is not None)
    if target.exists() and not target.is_dir():
        raise InputError(f"Cannot export into {str(target)!r}: it is a file, not a folder.")
    check_output_paths(paths.values(), force=force)  # the one output-path check
    prov, covariates = _split_provenance(table, provenance)
    schema = table_schema(table, input_columns=input_columns, covariates=covariates,
                          descriptions=descriptions, units=units)  # fmt: skip
    df = _normalised(table, schema)
    descriptor = _descriptor(name, title, schema, {
        **jsonable(prov),
        "software": software_versions(),
        "project_sha256": project_sha256,
        "created": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "rows": len(df),
    })  # fmt: skip
    fmt = "(no format)"
    try:
        with atomic_group(), contextlib.ExitStack() as stack:  # every file renamed at the end, together
            tmp = {key: stack.enter_context(atomic_path(p)) for key, p in paths.items()}
            for fmt in formats:
                writer = EXPORT_FORMATS[fmt].obj
                assert writer is not None
                writer(df, tmp, descriptor, name)
            if fit is not None:
                tmp["fit_json"].write_text(_fit_json(fit), encoding="utf-8")
                tmp["fit_text"].write_text(_fit_text(fit), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"Cannot export into {str(target)!r}: {exc.strerror or exc}.") from exc
    except ImportError as exc:
        needs = EXPORT_FORMATS[fmt].info["needs"] if fmt in EXPORT_FORMATS else None
        hint = f" (the {fmt!r} format needs the optional library {needs})" if needs else ""
        raise InputError(f"Cannot export into {str(target)!r}: {exc}{hint}") from exc
    return paths
