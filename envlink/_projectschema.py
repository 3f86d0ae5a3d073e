"""The schema of envlink's TOML project file: every section and key, with line-aware errors.

:func:`validate` checks a parsed project (a ``dict`` from :mod:`tomllib`) against
:data:`SECTIONS` and raises :class:`~envlink.errors.InputError` naming the key, the
line of the file it is on, and the allowed keys or values. Line numbers are found
by scanning the text (``tomllib`` does not report them). :func:`check_files` and
:func:`check_columns` then check the files and columns a project names, with the
same located messages.
"""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from envlink._util import did_you_mean
from envlink.errors import InputError

__all__ = ["SECTIONS", "KeySpec", "key_lines", "validate", "where", "check_files", "check_columns",
           "formula_columns", "resolve_path", "STATS", "WINDOWS", "SPATIAL_RULES"]

EFFECT_KINDS = (
    "logit_proportion", "arcsine_proportion", "log_odds_ratio", "log_risk_ratio", "hedges_g",
    "log_response_ratio", "fisher_z", "ln_vr", "ln_cvr",
)  # fmt: skip
ZERO_CELLS = ("zero_rows", "all_rows", "none")
METHODS = ("REML", "ML", "DL", "PM", "HE", "SJ")
TESTS = ("z", "knapp-hartung")
FORMATS = ("csv", "parquet", "gpkg")
STATS = "mean, min, max, sum, std, quantile:Q, above:T, degree-days:T, anomaly, mmm or dhw-max"
WINDOWS = "period, lag:N{D|M|Y}, before-start:N{D|M|Y}, after-end:N{D|M|Y} or around-mid:N{D|M|Y}"
SPATIAL_RULES = "nearest, bilinear, nearest-valid:Dkm, buffer:Rkm or polygon"

_NUM = r"[0-9]+(?:\.[0-9]+)?"
_STAT_RE = re.compile(
    rf"^(mean|min|max|sum|std|anomaly|mmm|dhw-max|quantile:(0(\.[0-9]+)?|1(\.0+)?)"
    rf"|above:-?{_NUM}|degree-days:-?{_NUM})$"
)
_WINDOW_RE = re.compile(r"^(period|(lag|before-start|after-end|around-mid):[0-9]+[DMY])$")
_SPATIAL_RE = re.compile(rf"^(nearest|bilinear|polygon|nearest-valid:{_NUM}km|buffer:{_NUM}km)$")
_BASELINE_RE = re.compile(r"^[0-9]{4}-[0-9]{4}$")
_IDENT_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class KeySpec:
    """One key: its kind, whether it is required, what it allows (in words), a checker."""

    kind: str  # "str", "number", "bool", "list[str]", "table", "str|number"
    allowed: str
    required: bool = False
    check: Callable[[Any], bool] | None = None


def _in(choices: tuple[str, ...]) -> Callable[[Any], bool]:
    return lambda v: v in choices


def _words(choices: tuple[str, ...]) -> str:
    return "one of " + ", ".join(repr(c) for c in choices)


_COLUMN = "a column name of the studies table"
SECTIONS: dict[str, dict[str, KeySpec]] = {
    "project": {
        "title": KeySpec("str", "a title for the report and the data package"),
        "out": KeySpec("str", "an output folder (relative to the project file)"),
        "cache_dir": KeySpec("str", "an extraction cache folder (default OUT/.cache)"),
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
        "path": KeySpec("str", "a grid file (netCDF, Zarr or GeoTIFF)", required=True),
        "variable": KeySpec("str", "the variable's name in the file"),
    },
    "covariates[]": {
        "name": KeySpec("str", "a new column name (letters, digits, _)", required=True,
                        check=lambda v: bool(_IDENT_RE.match(v))),
        "grid": KeySpec("str", "the name of a [grids.NAME] table", required=True),
        "stat": KeySpec("str", STATS, check=lambda v: bool(_STAT_RE.match(v))),
        "window": KeySpec("str", WINDOWS, check=lambda v: bool(_WINDOW_RE.match(v))),
        "spatial": KeySpec("str", SPATIAL_RULES, check=lambda v: bool(_SPATIAL_RE.match(v))),
        "baseline": KeySpec("str", "years as 'YYYY-YYYY'", check=lambda v: bool(_BASELINE_RE.match(v))),
        "mmm": KeySpec("str|number", "a number in °C or a climatology grid file"),
        "time_weights": KeySpec("str", _words(("duration", "equal")),
                                check=_in(("duration", "equal"))),
        "min_coverage": KeySpec("number", "a fraction from 0 to 1", check=lambda v: 0 <= v <= 1),
    },  # fmt: skip
    "effects": {
        "kind": KeySpec("str", _words(EFFECT_KINDS), required=True, check=_in(EFFECT_KINDS)),
        "name": KeySpec("str", "the effect column to add (default 'effect')"),
        "variance": KeySpec("str", "the variance column to add (default 'variance')"),
        "columns": KeySpec("table", "a table of role = column name (e.g. events = 'diseased')",
                           check=lambda v: all(isinstance(c, str) for c in v.values())),
        "correction": KeySpec("number", "a continuity correction >= 0 (count kinds)",
                              check=lambda v: v >= 0),
        "zero_cells": KeySpec("str", _words(ZERO_CELLS), check=_in(ZERO_CELLS)),
        "exact": KeySpec("bool", "true or false (hedges_g: exact small-sample factor J)"),
        "bias_correction": KeySpec("bool", "true or false (log_response_ratio)"),
    },
    "model": {
        "moderators": KeySpec("str", "a moderator formula such as 'sst_anom + depth'"),
        "method": KeySpec("str", _words(METHODS), check=_in(METHODS)),
        "test": KeySpec("str", _words(TESTS), check=_in(TESTS)),
        "nested": KeySpec("str", _COLUMN + " (random effect; effects nested in it)"),
        "cluster": KeySpec("str", _COLUMN + " (cluster-robust CR2 standard errors)"),
        "permutations": KeySpec("number", "a whole number >= 0 (0: no permutation test)",
                                check=lambda v: isinstance(v, int) and v >= 0),
        "seed": KeySpec("number", "a whole number (seed of the permutations)",
                        check=lambda v: isinstance(v, int)),
    },
    "export": {
        "name": KeySpec("str", "a file stem (letters, digits, '.', '_', '-')",
                        check=lambda v: bool(re.fullmatch(r"[A-Za-z0-9._-]+", v))),
        "formats": KeySpec("list[str]", "a list drawn from " + ", ".join(repr(f) for f in FORMATS),
                           check=lambda v: all(f in FORMATS for f in v)),
        "report": KeySpec("bool", "true or false"),
        "moderator": KeySpec("str", "the column drawn in the bubble plot"),
    },
}
TOP = ("project", "studies", "locate", "grids", "covariates", "effects", "model", "export")
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
            raise err.fail(kpath, f"the key {err.dotted(kpath)!r} must be {spec.allowed}; "
                           f"got {value!r}.")
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
    for section in ("project", "studies", "locate", "effects", "model", "export"):
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


def check_files(project: Any, outputs: Any = ()) -> None:
    """Every file the project names exists, and none is one of ``outputs`` (key and line named)."""
    files: list[tuple[tuple[Any, ...], Path]] = [(("studies", "path"), project.studies)]
    if project.gazetteer is not None:
        files.append((("locate", "gazetteer"), project.gazetteer))
    used = {c["grid"] for c in project.covariates}
    for name, spec in project.section("grids").items():
        if name in used:
            files.append((("grids", name, "path"), resolve_path(project.root, spec["path"])))
    for i, cov in enumerate(project.covariates):
        mmm = cov.get("mmm")
        if isinstance(mmm, str):
            files.append((("covariates", i, "mmm"), resolve_path(project.root, mmm)))
    for key, path in files:
        if not path.exists():
            raise InputError(
                f"{where(project, *key)}: the key {_dotted(key)!r} names {str(path)!r}, which "
                "does not exist (relative paths are relative to the project file's folder)."
            )
    if outputs:
        inputs = {path.resolve(): key for key, path in files}
        inputs[Path(project.source).resolve()] = ("project file",)
        for out in outputs:
            found = inputs.get(Path(out).resolve())
            if found is not None:
                raise InputError(
                    f"{where(project, *found) if found != ('project file',) else project.source}: the "
                    f"output {str(out)!r} is also an input ({_dotted(found)}); the run would "
                    "overwrite it. Choose another output folder (--out DIR) or [export] name."
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
    for path, col in wanted:
        if col not in have:
            dotted = ".".join(path)
            raise InputError(
                f"{where(project, *path)}: the key {dotted!r} names column {col!r}, which the "
                f"studies table {str(project.studies)!r} does not have.{did_you_mean(col, have)} "
                f"Columns: {', '.join(repr(c) for c in have)}."
            )


def formula_columns(formula: str, columns: list[str]) -> list[str]:
    """Columns of ``columns`` that the formula names."""
    tokens = set(re.findall(r"[A-Za-z_][A-Za-z0-9_.]*", formula))
    return [c for c in columns if c in tokens]
