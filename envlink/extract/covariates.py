"""Several covariates in one ``attach`` call: reading each covariate's description.

A covariate is written either as text ``NAME=STAT`` or ``NAME=STAT@WINDOW`` (the
statistic and window in the spelling of their registries, e.g.
``"sst_lag3=mean@lag:3M"``, ``"warm=above:29@before-start:90D"``), or as a mapping
with a ``name`` and any of the per-covariate options of :func:`envlink.attach`
(``stat``, ``window``, ``spatial``, ``baseline``, ``mmm``, ``threshold``,
``time_weights``, ``min_coverage``). What a covariate leaves out comes from the
call's own options. ``@`` never appears in a statistic's or window's name, so the
text splits without ambiguity.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from envlink.core.columns import COVARIATE_NAME_RULE, COVARIATE_SUFFIXES, covariate_name_ok
from envlink.errors import InputError, param_error

__all__ = ["COVARIATE_OPTIONS", "parse_covariate", "parse_covariates", "SPEC_FORM"]

#: The options a covariate may set for itself (the others are the call's).
COVARIATE_OPTIONS = ("stat", "window", "spatial", "baseline", "mmm", "threshold", "time_weights", "min_coverage")
#: The text form, in words (for messages and --help).
SPEC_FORM = "'NAME=STAT' or 'NAME=STAT@WINDOW' (e.g. 'sst_lag3=mean@lag:3M')"


def parse_covariate(spec: str | Mapping[str, Any], defaults: Mapping[str, Any],
                    caller: str = "attach") -> dict[str, Any]:
    """One covariate's name and options, the call's ``defaults`` filling what it leaves out.

    Examples
    --------
    >>> d = {"stat": "mean", "window": "period", "spatial": "nearest"}
    >>> parse_covariate("sst_lag3 = max @ lag:3M", d)
    {'stat': 'max', 'window': 'lag:3M', 'spatial': 'nearest', 'name': 'sst_lag3'}
    >>> parse_covariate({"name": "anom", "stat": "anomaly", "baseline": "1991-2020"}, d)["baseline"]
    '1991-2020'
    >>> parse_covariate("sst", d)
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: The 'covariates' parameter of attach must be ... got 'sst'.
    """
    out = dict(defaults)
    if isinstance(spec, str):
        name, eq, rest = spec.partition("=")
        stat, at, window = rest.partition("@")
        if not eq or not name.strip() or not stat.strip() or (at and not window.strip()):
            raise param_error("covariates", caller, f"{SPEC_FORM}, or a mapping with a 'name'", spec)
        out.update(stat=stat.strip(), name=name.strip())
        if at:
            out["window"] = window.strip()
        return out
    if isinstance(spec, Mapping):
        unknown = [k for k in spec if k != "name" and k not in COVARIATE_OPTIONS]
        if "name" not in spec or unknown:
            allowed = "a mapping with a 'name' and any of " + ", ".join(repr(k) for k in COVARIATE_OPTIONS)
            raise param_error("covariates", caller, allowed, dict(spec))
        out.update(spec)
        return out
    raise param_error("covariates", caller, f"{SPEC_FORM}, or a mapping with a 'name'", spec)


def _reads(cov: Mapping[str, Any], key: str) -> bool:
    """Whether the covariate's statistic reads ``mmm`` / ``threshold`` (True when unknown:
    the statistic's own check names a bad one)."""
    from envlink.extract.statistics import STATISTICS

    try:
        obj = STATISTICS.parse(str(cov.get("stat"))).entry.obj
    except InputError:
        return True
    return obj is None or bool(obj.takes_mmm if key == "mmm" else obj.takes_threshold)


def _only_where_read(covs: list[dict[str, Any]], specs: Sequence[Any], defaults: Mapping[str, Any],
                     key: str) -> None:
    """A call's ``mmm=`` / ``threshold=`` goes to the covariates whose statistic reads it
    (``dhw-max`` beside ``max``); given to none that reads it, it stays, to be refused."""
    if defaults.get(key) is None:
        return
    inherited = [i for i, s in enumerate(specs) if not (isinstance(s, Mapping) and key in s)]
    if any(_reads(covs[i], key) for i in range(len(covs))):
        for i in inherited:
            if not _reads(covs[i], key):
                covs[i][key] = None


def parse_covariates(specs: Sequence[str | Mapping[str, Any]] | str | Mapping[str, Any],
                     defaults: Mapping[str, Any], caller: str = "attach") -> list[dict[str, Any]]:
    """Every covariate of a call (:func:`parse_covariate`), with names checked against each
    other: no two covariates may write one column.

    Examples
    --------
    >>> [c["name"] for c in parse_covariates(["a=mean", "b=max@lag:1Y"], {})]
    ['a', 'b']
    >>> parse_covariates(["a=mean", "a=max"], {})
    Traceback (most recent call last):
    ...
    envlink.errors.InputError: Two covariates would both write the column 'a'; give each covariate its own name.
    >>> [c["mmm"] for c in parse_covariates(["h=dhw-max", "m=max"], {"mmm": 28.5})]
    [28.5, None]
    """
    if isinstance(specs, str | Mapping):
        specs = [specs]
    if not isinstance(specs, Sequence) or not specs:
        raise param_error("covariates", caller, f"a non-empty list of {SPEC_FORM} or mappings", specs)
    out = [parse_covariate(s, defaults, caller) for s in specs]
    for key in ("mmm", "threshold"):  # the call's value, for the covariates whose statistic reads it
        _only_where_read(out, specs, defaults, key)
    seen: dict[str, str] = {}
    for cov in out:
        name = cov["name"]
        if not covariate_name_ok(name):
            raise param_error("name", caller, COVARIATE_NAME_RULE, name)
        for col in (name + s for s in COVARIATE_SUFFIXES):
            if col in seen:
                raise InputError(f"Two covariates would both write the column {col!r}; give each covariate "
                                 "its own name.")
            seen[col] = name
    return out
