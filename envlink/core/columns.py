"""The names, descriptions and units of every column envlink adds (the table contracts).

One home, as code, for the column contracts documented in docs/locate.md ("Columns
added"), docs/extract.md and docs/methods.md: the columns of the locate stage, the
suffixes of a covariate's columns, the effect-size columns and ``fit_included``.
Stages name their output columns from here; the export schema describes them from
here.
"""

from __future__ import annotations

import re

__all__ = [
    "LOCATE_COLUMNS",
    "COVARIATE_SUFFIXES",
    "EFFECT_COLUMNS",
    "FIT_INCLUDED",
    "DATE_COLUMNS",
    "KNOWN_COLUMNS",
    "SUFFIX_DESCRIPTIONS",
    "covariate_columns",
    "COVARIATE_NAME_RULE",
    "covariate_name_ok",
]

#: Columns the locate stage adds, in order.
LOCATE_COLUMNS = (
    "site_lat",
    "site_lon",
    "site_precision_km",
    "site_wkt",
    "period_start",
    "period_end",
    "period_precision",
    "locate_status",
    "locate_flags",
    "locate_notes",
)
#: What a covariate's name may be, in words: the one rule of the project file, the
#: command line (--name, --covariate NAME=...) and envlink.attach / attach_many.
COVARIATE_NAME_RULE = "a column name of letters, digits and '_', not starting with a digit (e.g. 'sst_lag3')"
_COVARIATE_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
#: Columns added for a covariate named C: C + suffix, in order.
COVARIATE_SUFFIXES = ("", "_flags", "_cell_lat", "_cell_lon", "_distance_km", "_coverage")
#: Default names of the effect-size columns.
EFFECT_COLUMNS = ("effect", "variance", "effect_flags")
#: The boolean column that says whether a row entered the meta-regression.
FIT_INCLUDED = "fit_included"
#: Columns holding ISO 8601 dates.
DATE_COLUMNS = ("period_start", "period_end")

#: Description and unit of the columns the stages add under fixed names.
KNOWN_COLUMNS: dict[str, tuple[str, str | None]] = {
    "site_lat": ("Site latitude, WGS84 decimal degrees.", "degrees_north"),
    "site_lon": ("Site longitude, WGS84 decimal degrees in [-180, 180).", "degrees_east"),
    "site_precision_km": ("Precision of the reported site position.", "km"),
    "period_start": ("First day of the sampling period (ISO 8601, inclusive).", None),
    "period_end": ("Last day of the sampling period (ISO 8601, inclusive).", None),
    "period_precision": ("Precision of the reported period: day, month, season, year, years.", None),
    "locate_status": ("Result of locating the row: ok, flagged or rejected.", None),
    "locate_flags": ("QA codes of the locate stage, separated by ';'.", None),
    "locate_notes": ("Plain-words notes of the locate stage.", None),
    "site_wkt": ("Region polygon of the site as WKT (WGS84), for region sites.", None),
    "effect": ("Effect size.", None),
    "variance": ("Sampling variance of the effect size.", None),
    "effect_flags": ("QA codes of the effect-size computation, separated by ';'.", None),
    FIT_INCLUDED: ("True when the row entered the meta-regression.", None),
}
#: Description (with ``{c}`` for the covariate) and unit of each covariate suffix.
SUFFIX_DESCRIPTIONS: dict[str, tuple[str, str | None]] = {
    "_flags": ("QA codes of covariate {c}, separated by ';'.", None),
    "_cell_lat": ("Latitude of the grid cell that gave covariate {c}.", "degrees_north"),
    "_cell_lon": ("Longitude of the grid cell that gave covariate {c}.", "degrees_east"),
    "_distance_km": ("Great-circle distance from the site to that cell.", "km"),
    "_coverage": ("Fraction of the window's time steps with data, for {c}.", "1"),
}


def covariate_columns(name: str) -> list[str]:
    """The columns added for covariate ``name``, in order.

    Examples
    --------
    >>> covariate_columns("sst")[:3]
    ['sst', 'sst_flags', 'sst_cell_lat']
    """
    return [name + s for s in COVARIATE_SUFFIXES]


def covariate_name_ok(name: object) -> bool:
    """Whether ``name`` may name a covariate (:data:`COVARIATE_NAME_RULE`).

    The name becomes a column and a term of a model's moderators, so it is a plain
    identifier: ASCII letters, digits and ``_``, not starting with a digit.

    Parameters
    ----------
    name : object
        The name given.

    Returns
    -------
    bool
        True when the name follows the rule.

    Examples
    --------
    >>> [covariate_name_ok(n) for n in ("sst_lag3", "_x", "bad name", "3m", "sst-mean", "", None)]
    [True, True, False, False, False, False, False]
    """
    return isinstance(name, str) and _COVARIATE_NAME.fullmatch(name) is not None
