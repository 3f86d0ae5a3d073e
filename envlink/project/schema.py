"""The schema of envlink's TOML project file: every section and key, with line-aware errors.

:func:`validate` checks a parsed project (a ``dict`` from :mod:`tomllib`) against
:data:`SECTIONS` and raises :class:`~envlink.errors.InputError` naming the key, the
line of the file it is on, and the allowed keys or values. Line numbers are found
by scanning the text (``tomllib`` does not report them). :func:`check_files` and
:func:`check_columns` then check the files and columns a project names, with the
same located messages.
"""

from __future__ import annotations

import glob
import os
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from envlink.core.calendars import CF_CALENDARS
from envlink.core.columns import COVARIATE_NAME_RULE, covariate_name_ok
from envlink.core.util import did_you_mean
from envlink.effects.core import ZERO_CELL_RULES
from envlink.effects.kinds import EFFECT_KINDS
from envlink.errors import InputError
from envlink.export.formats import EXPORT_FORMATS, REFUSED_FORMATS, parse_formats
from envlink.extract.family import ANCHORS as _ANCHORS
from envlink.extract.rules import SPATIAL_RULES as _SPATIAL_RULES
from envlink.extract.statistics import STATISTICS as _STATISTICS
from envlink.extract.windows import TIME_WEIGHTS
from envlink.extract.windows import WINDOWS as _WINDOWS
from envlink.metareg.shuffles import PERMUTATION_SCHEMES as _SCHEMES
from envlink.metareg.spatial_weights import SPATIAL_WEIGHTS as _WEIGHTS
from envlink.metareg.vocabulary import ESTIMATORS, TESTS
from envlink.project.keyspec import KeySpec, band_dates_ok, steps_ok, whole
from envlink.project.keyspec import choice_words as _words
from envlink.project.keyspec import in_choices as _in

__all__ = ["SECTIONS", "KeySpec", "key_lines", "validate", "where", "check_files", "project_inputs",
           "check_columns", "resolve_path", "STATS", "WINDOWS", "SPATIAL_RULES"]

# the covariates' vocabularies are the extract stage's registries (one spelling policy);
# these texts are those of import time, the messages read the registries when made
STATS = _STATISTICS.allowed()
WINDOWS = _WINDOWS.allowed()
SPATIAL_RULES = _SPATIAL_RULES.allowed()
_BASELINE_RE = re.compile(r"^[0-9]{4}-[0-9]{4}$")


def _formats_problem(value: list[str]) -> str:
    """Why a list of export formats is refused ("" when it is not): a refused format's reason,
    or two formats writing one file."""
    for f in value:
        if not EXPORT_FORMATS.accepts(f) and "".join(f.lower().replace("_", "-").split()) not in REFUSED_FORMATS:
            return ""  # not a format: the allowed list says enough
    try:
        parse_formats(value, "[export]")
    except InputError as exc:
        return re.sub(r"^The 'formats' parameter of \[export\] (cannot be |names )", "", str(exc))
    return ""


_COLUMN = "a column name of the studies table"
SECTIONS: dict[str, dict[str, KeySpec]] = {
    "project": {
        "title": KeySpec("str", "a title for the report and the data package"),
        "out": KeySpec("str", "an output folder (relative to the project file)"),
        "cache_dir": KeySpec("str", "envlink's cache folder, holding the cell-series store "
                             "(default: $ENVLINK_CACHE, else the user's cache folder)"),
        "scheduler": KeySpec("str", "the address of a Dask scheduler (tcp://HOST:8786): the grids' cells "
                             "are read on its cluster's workers"),
    },
    "studies": {
        "path": KeySpec("str", "the studies table (CSV, TSV, Parquet or Excel)", required=True),
        "study": KeySpec("str", _COLUMN + " naming each row's study"),
    },
    "locate": {
        "lat": KeySpec("str", _COLUMN), "lon": KeySpec("str", _COLUMN),
        "coords": KeySpec("str", _COLUMN), "site": KeySpec("str", _COLUMN),
        "gazetteer": KeySpec("str", "a gazetteer file (CSV, GeoPackage, GeoJSON...)"),
        "period": KeySpec("str", _COLUMN), "start": KeySpec("str", _COLUMN),
        "end": KeySpec("str", _COLUMN),
        "order": KeySpec("str", _words(("dayfirst", "monthfirst")),
                         check=_in(("dayfirst", "monthfirst"))),
        "plain_season_south": KeySpec("str", _words(("ambiguous", "austral", "boreal")),
                                      check=_in(("ambiguous", "austral", "boreal"))),
        "season_months": KeySpec("table", "a table of season name = [month numbers 1-12]",
                                 check=lambda v: all(isinstance(m, list) and m and all(
                                     isinstance(i, int) and 1 <= i <= 12 for i in m)
                                     for m in v.values())),
        "fuzzy_threshold": KeySpec("number", "a number from 0 to 100", check=lambda v: 0 <= v <= 100),
        "fuzzy_margin": KeySpec("number", "a number >= 0", check=lambda v: v >= 0),
    },  # fmt: skip
    "grids.*": {
        "path": KeySpec("str", "a grid file (netCDF, Zarr or GeoTIFF), a glob of daily files, or a URL",
                        required=True),
        "variable": KeySpec("str", "the variable's name in the file"),
        "band_dates": KeySpec("str|list", "GeoTIFF band dates: a list of ISO dates or [start, end] pairs, "
                              "one per band, or text such as 'R/2001-01-01/P1M'", check=band_dates_ok),
        "units": KeySpec("str", "the units of the values, when the file does not say (e.g. 'degC')"),
        "calendar": KeySpec("str", _words(CF_CALENDARS), check=lambda v: v.strip().lower() in CF_CALENDARS),
    },
    "covariates[]": {
        "name": KeySpec("str", COVARIATE_NAME_RULE, required=True, check=covariate_name_ok),
        "grid": KeySpec("str", "the name of a [grids.NAME] table", required=True),
        "stat": KeySpec("str", _STATISTICS.allowed, check=_STATISTICS.accepts),
        "window": KeySpec("str", _WINDOWS.allowed, check=_WINDOWS.accepts),
        "spatial": KeySpec("str", _SPATIAL_RULES.allowed, check=_SPATIAL_RULES.accepts),
        "baseline": KeySpec("str", "years as 'YYYY-YYYY'", check=lambda v: bool(_BASELINE_RE.match(v))),
        "mmm": KeySpec("str|number", "a number in °C or a climatology grid file"),
        "time_weights": KeySpec("str", TIME_WEIGHTS.allowed, check=TIME_WEIGHTS.accepts),
        "min_coverage": KeySpec("number", "a fraction from 0 to 1", check=lambda v: 0 <= v <= 1),
    },  # fmt: skip
    "effects": {
        "kind": KeySpec("str", EFFECT_KINDS.allowed, required=True, check=EFFECT_KINDS.accepts),
        "name": KeySpec("str", "the effect column to add (default 'effect')"),
        "variance": KeySpec("str", "the variance column to add (default 'variance')"),
        "columns": KeySpec("table", "a table of role = column name (e.g. events = 'diseased')",
                           check=lambda v: all(isinstance(c, str) for c in v.values())),
        "correction": KeySpec("number", "a continuity correction >= 0 (count kinds)",
                              check=lambda v: v >= 0),
        "zero_cells": KeySpec("str", ZERO_CELL_RULES.allowed, check=ZERO_CELL_RULES.accepts),
        "exact": KeySpec("bool", "true or false (hedges_g: exact small-sample factor J)"),
        "bias_correction": KeySpec("bool", "true or false (log_response_ratio)"),
    },
    "model": {
        "moderators": KeySpec("str", "a moderator formula such as 'sst_anom + depth'"),
        "method": KeySpec("str", ESTIMATORS.allowed, check=ESTIMATORS.accepts),
        "test": KeySpec("str", TESTS.allowed, check=TESTS.accepts),
        "nested": KeySpec("str", _COLUMN + " (random effect; effects nested in it)"),
        "cluster": KeySpec("str", _COLUMN + " (cluster-robust CR2 standard errors)"),
        "permutations": KeySpec("number", "a whole number >= 0 (0: no permutation test)",
                                check=lambda v: isinstance(v, int) and v >= 0),
        "seed": KeySpec("number", "a whole number (seed of the permutations)",
                        check=lambda v: isinstance(v, int)),
        "permute": KeySpec("str", _SCHEMES.allowed, check=_SCHEMES.accepts),
    },
    "scan": {  # the window scan (docs/project-file.md, docs/inference.md)
        "grid": KeySpec("str", "the name of a [grids.NAME] table", required=True),
        "moderators": KeySpec("str", "moderators kept in every window's model (default none)"),
        "lags": KeySpec("str|number", "lags such as '0..12', '0..90:7' or '0,3,6'",
                        check=steps_ok(0)),
        "spans": KeySpec("str|number", "spans such as '1..6' or '7,14,28'", check=steps_ok(1)),
        "unit": KeySpec("str", _words(("D", "M")), check=_in(("D", "M", "d", "m"))),
        "anchors": KeySpec("list[str]", lambda: "a list drawn from " + _ANCHORS.allowed().removeprefix(
            "one of "), check=lambda v: bool(v) and all(_ANCHORS.accepts(a) for a in v)),
        "stats": KeySpec("list[str]", lambda: "a list of statistics: " + _STATISTICS.allowed(),
                         check=lambda v: bool(v) and all(_STATISTICS.accepts(a) for a in v)),
        "spatial": KeySpec("str", _SPATIAL_RULES.allowed, check=_SPATIAL_RULES.accepts),
        "baseline": KeySpec("str", "years as 'YYYY-YYYY'", check=lambda v: bool(_BASELINE_RE.match(v))),
        "mmm": KeySpec("number", "a number in °C"),
        "min_coverage": KeySpec("number", "a fraction from 0 to 1", check=lambda v: 0 <= v <= 1),
        "permutations": KeySpec("number", "a whole number >= 0", check=whole(0)),
        "seed": KeySpec("number", "a whole number", check=whole(None)),
        "permute": KeySpec("str", _SCHEMES.allowed, check=_SCHEMES.accepts),
    },
    "imputation": {  # imprecise dates drawn M times, fits pooled by Rubin's rules
        "draws": KeySpec("number", "a whole number >= 2", check=whole(2)),
        "seed": KeySpec("number", "a whole number", check=whole(None)),
        "effort": KeySpec("str", _COLUMN + " holding each row's sampling effort in days"),
    },
    "checks": {  # diagnostics of the fitted model
        "bias": KeySpec("bool", "true or false (small-study checks that keep the model)"),
        "spatial": KeySpec("str", _WEIGHTS.allowed, check=_WEIGHTS.accepts),
        "spatial_permutations": KeySpec("number", "a whole number >= 0", check=whole(0)),
        "spatial_effect": KeySpec("bool", "true or false (a spatial random effect)"),
    },
    "export": {
        "name": KeySpec("str", "a file stem (letters, digits, '.', '_', '-')",
                        check=lambda v: bool(re.fullmatch(r"[A-Za-z0-9._-]+", v))),
        "formats": KeySpec("list[str]", lambda: "a list drawn from " + EXPORT_FORMATS.allowed().removeprefix("one of "),
                           check=lambda v: all(map(EXPORT_FORMATS.accepts, v)) and not _formats_problem(v),
                           explain=_formats_problem),
        "report": KeySpec("bool", "true or false"),
        "moderator": KeySpec("str", "the column drawn in the bubble plot"),
    },
}
TOP = ("project", "studies", "locate", "grids", "covariates", "effects", "model", "scan",
       "imputation", "checks", "export")
REQUIRED_TOP = ("studies",)

_HEADER = re.compile(r"^\[\s*([^\[\]]+?)\s*\]\s*(#.*)?$")
_ARRAY_HEADER = re.compile(r"^\[\[\s*([^\[\]]+?)\s*\]\]\s*(#.*)?$")
_KEY = re.compile(r"""^("[^"]*"|'[^']*'|[A-Za-z0-9_.\- ]+?)\s*=""")


def _split_key(text: str) -> tuple[str, ...]:
    return tuple(p.strip().strip("\"'") for p in text.split("."))


def key_lines(text: str) -> dict[tuple[Any, ...], int]:
    """Map each table header and key path to its 1-based line number.

    Array-of-tables entries get their index: ``("covariates", 1, "stat")``.

    Examples
    --------
    >>> lines = key_lines('[model]\\nmethod = "ML"\\n[[covariates]]\\nname = "a"\\n')
    >>> lines[("model", "method")], lines[("covariates", 0, "name")]
    (2, 4)
    """
    lines: dict[tuple[Any, ...], int] = {}
    counters: dict[tuple[str, ...], int] = {}
    current: tuple[Any, ...] = ()
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if m := _ARRAY_HEADER.match(line):
            name = _split_key(m.group(1))
            counters[name] = counters.get(name, -1) + 1
            current = (*name, counters[name])
            lines.setdefault(current, number)
        elif m := _HEADER.match(line):
            current = _split_key(m.group(1))
            lines.setdefault(current, number)
        elif m := _KEY.match(line):
            lines.setdefault((*current, *_split_key(m.group(1))), number)
    return lines


class _Errors:
    """Builds the located error messages for one file."""

    def __init__(self, source: str, lines: Mapping[tuple[Any, ...], int]):
        self.source, self.lines = source, lines

    def where(self, path: tuple[Any, ...]) -> str:
        for n in range(len(path), 0, -1):
            if path[:n] in self.lines:
                return f"{self.source}, line {self.lines[path[:n]]}"
        return self.source

    @staticmethod
    def dotted(path: tuple[Any, ...]) -> str:
        out = ""
        for part in path:
            out += f"[{part}]" if isinstance(part, int) else (("." if out else "") + str(part))
        return out

    def fail(self, path: tuple[Any, ...], message: str) -> InputError:
        return InputError(f"{self.where(path)}: {message}")


def _kind_ok(kind: str, value: Any) -> bool:
    if kind == "str":
        return isinstance(value, str) and value.strip() != ""
    if kind == "number":
        return isinstance(value, int | float) and not isinstance(value, bool)
    if kind == "bool":
        return isinstance(value, bool)
    if kind == "list[str]":
        return isinstance(value, list) and all(isinstance(v, str) for v in value)
    if kind == "table":
        return isinstance(value, dict)
    if kind == "str|number":
        return _kind_ok("str", value) or _kind_ok("number", value)
    if kind == "str|list":
        return _kind_ok("str", value) or isinstance(value, list)
    raise AssertionError(kind)


def _check_table(err: _Errors, path: tuple[Any, ...], table: Any, specs: Mapping[str, KeySpec],
                 title: str) -> None:
    if not isinstance(table, dict):
        raise err.fail(path, f"{err.dotted(path)!r} must be a table ({title}); got {table!r}.")
    for key, value in table.items():
        kpath = (*path, key)
        if key not in specs:
            raise err.fail(kpath, f"unknown key {key!r} in {title}.{did_you_mean(key, specs)} "
                           f"Allowed keys: {', '.join(specs)}.")
        spec = specs[key]
        if not _kind_ok(spec.kind, value) or (spec.check is not None and not spec.check(value)):
            more = spec.explain(value) if spec.explain is not None and _kind_ok(spec.kind, value) else ""
            raise err.fail(kpath, f"the key {err.dotted(kpath)!r} must be {spec.allowed}; "
                           f"got {value!r}.{' ' + more if more else ''}")
    for key, spec in specs.items():
        if spec.required and key not in table:
            raise err.fail(path, f"{title} needs the key {key!r} ({spec.allowed}).")


def validate(data: Mapping[str, Any], text: str, source: str) -> None:
    """Check a parsed project file; raise :class:`InputError` at the first problem.

    Examples
    --------
    >>> validate({"studies": {"pathh": "t.csv"}}, '[studies]\\npathh = "t.csv"\\n', "p.toml")
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: p.toml, line 2: unknown key 'pathh' in [studies]. Did you mean 'path'? Allowed keys: path, study.
    """
    err = _Errors(source, key_lines(text))
    for key in data:
        if key not in TOP:
            raise err.fail((key,), f"unknown section {key!r}.{did_you_mean(key, TOP)} "
                           f"Allowed sections: {', '.join(TOP)}.")
    for key in REQUIRED_TOP:
        if key not in data:
            raise err.fail((), f"the project file needs a [{key}] section.")
    for section in ("project", "studies", "locate", "effects", "model", "scan", "imputation",
                    "checks", "export"):
        if section in data:
            _check_table(err, (section,), data[section], SECTIONS[section], f"[{section}]")
    grids = data.get("grids", {})
    if not isinstance(grids, dict):
        raise err.fail(("grids",), "'grids' must hold one [grids.NAME] table per grid.")
    for name, table in grids.items():
        _check_table(err, ("grids", name), table, SECTIONS["grids.*"], f"[grids.{name}]")
    covariates = data.get("covariates", [])
    if not isinstance(covariates, list):
        raise err.fail(("covariates",), "covariates must be written as [[covariates]] tables.")
    seen: set[str] = set()
    for i, table in enumerate(covariates):
        _check_table(err, ("covariates", i), table, SECTIONS["covariates[]"],
                     f"[[covariates]] number {i + 1}")
        if table["grid"] not in grids:
            raise err.fail(("covariates", i, "grid"),
                           f"the key 'covariates[{i}].grid' must be the name of a [grids.NAME] "
                           f"table ({', '.join(repr(g) for g in grids) or 'none defined'}); "
                           f"got {table['grid']!r}.{did_you_mean(table['grid'], grids)}")
        if table["name"] in seen:
            raise err.fail(("covariates", i, "name"), f"covariate name {table['name']!r} is used twice.")
        seen.add(table["name"])
    if "model" in data and "effects" not in data:
        raise err.fail(("model",), "[model] needs an [effects] section to fit.")
    for section in ("scan", "imputation", "checks"):
        if section in data and "model" not in data:
            raise err.fail((section,), f"[{section}] needs a [model] section (the model it uses).")
    if "scan" in data and data["scan"]["grid"] not in grids:
        g = data["scan"]["grid"]
        raise err.fail(("scan", "grid"), "the key 'scan.grid' must be the name of a [grids.NAME] "
                       f"table ({', '.join(repr(n) for n in grids) or 'none defined'}); got "
                       f"{g!r}.{did_you_mean(g, grids)}")


# ---------------------------------------------------------------- checks against the files
def where(project: Any, *path: Any) -> str:
    """``FILE, line N`` of the deepest part of ``path`` found in the project file."""
    lines = key_lines(project.text)
    for n in range(len(path), 0, -1):
        if tuple(path[:n]) in lines:
            return f"{project.source}, line {lines[tuple(path[:n])]}"
    return str(project.source)


def _dotted(key: tuple[Any, ...]) -> str:
    out = ""
    for part in key:
        out += f"[{part}]" if isinstance(part, int) else (("." if out else "") + str(part))
    return out


def resolve_path(root: Path, value: str) -> Path:
    """A path the project file names: ``~`` expanded, a relative one taken from ``root``."""
    path = Path(os.path.expanduser(value))
    return path if path.is_absolute() else root / path


def resolve_grid_path(root: Path, value: str) -> str | Path:
    """A ``[grids.NAME] path``: a URL as written, a glob pattern or path taken from ``root``.

    Examples
    --------
    >>> resolve_grid_path(Path("/p"), "https://host/sst.zarr"), str(resolve_grid_path(Path("/p"), "d/*.nc"))
    ('https://host/sst.zarr', '/p/d/*.nc')
    """
    if re.match(r"[A-Za-z][A-Za-z0-9+.-]*://", value) and not value.lower().startswith("file://"):
        return value
    path = resolve_path(root, value)
    return str(path) if set("*?[") & set(value) and not path.exists() else path


def _missing(path: str | Path) -> bool:
    if not isinstance(path, Path):  # a URL (checked when opened) or a glob pattern
        return "://" not in path and not glob.glob(path)
    return not path.exists()


def _project_files(project: Any) -> list[tuple[tuple[Any, ...], Path | str]]:
    """Every file the project names, with its key (a grid may be a URL or a glob pattern)."""
    files: list[tuple[tuple[Any, ...], Path | str]] = [(("studies", "path"), project.studies)]
    if project.gazetteer is not None:
        files.append((("locate", "gazetteer"), project.gazetteer))
    used = {c["grid"] for c in project.covariates} | ({project.section("scan")["grid"]}
                                                      if project.section("scan") else set())
    for name, spec in project.section("grids").items():
        if name in used:
            files.append((("grids", name, "path"), resolve_grid_path(project.root, spec["path"])))
    for i, cov in enumerate(project.covariates):
        mmm = cov.get("mmm")
        if isinstance(mmm, str):
            files.append((("covariates", i, "mmm"), resolve_path(project.root, mmm)))
    return files


def project_inputs(project: Any) -> dict[Path, str]:
    """Every file a run of the project reads -> its key and line, for the output-path check."""
    inputs = {path: f"{_dotted(key)}, {where(project, *key)}" for key, path in _project_files(project)
              if isinstance(path, Path)}
    if project.source is not None:
        inputs[Path(project.source)] = "the project file"
    return inputs


def check_files(project: Any) -> None:
    """Every file the project names exists (key and line named)."""
    for key, path in _project_files(project):
        if _missing(path):
            raise InputError(
                f"{where(project, *key)}: the key {_dotted(key)!r} names {str(path)!r}, which "
                "does not exist (relative paths are relative to the project file's folder)."
            )


def check_columns(project: Any, table: Any) -> None:
    """Every column named in the project exists in the studies table."""
    have = [str(c) for c in table.columns]
    wanted: list[tuple[tuple[str, ...], str]] = []
    if "study" in project.section("studies"):
        wanted.append((("studies", "study"), project.section("studies")["study"]))
    for key in ("lat", "lon", "coords", "site", "period", "start", "end"):
        if key in project.section("locate"):
            wanted.append((("locate", key), project.section("locate")[key]))
    for role, col in project.section("effects").get("columns", {}).items():
        wanted.append((("effects", "columns", role), col))
    for key in ("nested", "cluster"):
        if key in project.section("model"):
            wanted.append((("model", key), project.section("model")[key]))
    if "effort" in project.section("imputation"):
        wanted.append((("imputation", "effort"), project.section("imputation")["effort"]))
    for path, col in wanted:
        if col not in have:
            dotted = ".".join(path)
            raise InputError(
                f"{where(project, *path)}: the key {dotted!r} names column {col!r}, which the "
                f"studies table {str(project.studies)!r} does not have.{did_you_mean(col, have)} "
                f"Columns: {', '.join(repr(c) for c in have)}."
            )
