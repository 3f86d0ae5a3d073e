"""The exception and warning hierarchy: one home (envlink.errors), old names, stack level, pickling."""

from __future__ import annotations

import importlib
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest

import envlink.errors as errors
from envlink.errors import EnvlinkWarning, FieldError, InputError, param_error

#: warning class -> the stage modules that re-export it under its old name
OLD_HOMES = {
    "GridWarning": ["envlink.grids.conventions", "envlink.grids"],
    "ValidRangeWarning": ["envlink.grids.conventions", "envlink.grids"],
    "CacheWarning": ["envlink.extract.cache"],
    "BackTransformWarning": ["envlink.effects.core", "envlink.effects"],
    "MetaRegressionWarning": ["envlink.metareg.model", "envlink.metareg"],
    "DiagnosticWarning": ["envlink.metareg.diagnostics"],
}


@pytest.mark.parametrize("name", sorted(OLD_HOMES))
def test_every_warning_lives_in_errors_and_keeps_its_old_name(name):
    cls = getattr(errors, name)
    assert issubclass(cls, EnvlinkWarning)
    assert cls.__module__ == "envlink.errors"
    assert name in errors.__all__
    for module in OLD_HOMES[name]:
        assert getattr(importlib.import_module(module), name) is cls


def test_no_warning_class_is_defined_outside_errors():
    import ast
    from pathlib import Path

    root = Path(errors.__file__).parent
    found = []
    for path in sorted(root.rglob("*.py")):
        if path.name == "errors.py" and path.parent == root:
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef) and node.name.endswith("Warning"):
                found.append(f"{path.relative_to(root.parent)}: {node.name}")
    assert not found, found


def test_input_error_param_pickles():
    err = param_error("spatial", "attach", "one of 'nearest', 'bilinear'", "x")
    assert err.param == "spatial"
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is InputError and back.param == "spatial" and str(back) == str(err)
    plain = pickle.loads(pickle.dumps(InputError("no such column")))
    assert plain.param is None and str(plain) == "no such column"


def test_field_error_still_pickles_with_param_none():
    err = FieldError("period", "month 13 does not exist", "impossible_date", "2011-13")
    back = pickle.loads(pickle.dumps(err))
    assert (back.field, back.code, back.text, back.param) == ("period", "impossible_date", "2011-13", None)
    assert str(back) == str(err)


def test_site_name_error_pickles() -> None:
    from envlink.locate.gazetteer import SiteNameError

    err = SiteNameError("Kestrel", "not in (table).")
    back = pickle.loads(pickle.dumps(err))
    assert (back.value, back.reason, back.code, str(back)) == ("Kestrel", "not in (table).", "site_not_found",
                                                             "site 'Kestrel': not in (table).")


# ---------------------------------------------------------------------------------------
# warnings point at the user's line, however deep inside envlink they arise
# ---------------------------------------------------------------------------------------


def _only(caught, category):
    hits = [w for w in caught if issubclass(w.category, category)]
    assert hits, [str(w.message) for w in caught]
    return hits


def test_warn_points_at_the_caller():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        errors.warn("a note", errors.GridWarning)
    (w,) = _only(caught, errors.GridWarning)
    assert w.filename == __file__


def test_valid_range_warning_points_at_the_user(tmp_path):
    from grids._writers import simple_grid

    import envlink

    raw = np.array([[[0, 500, 1000, 1500]] * 3] * 2, dtype="int16")
    attrs = {"units": "K", "scale_factor": 0.01, "add_offset": 273.15,
             "valid_range": np.array([270.0, 285.0], dtype="float64")}
    p = simple_grid(tmp_path / "vr.nc", raw, lat=[-1.0, 0.0, 1.0], lon=[0.0, 1.0, 2.0, 3.0],
                    time=np.array([0.0, 31.0]), attrs=attrs)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        envlink.open_grid(p)
    for w in _only(caught, errors.ValidRangeWarning):
        assert w.filename == __file__


def test_cache_warning_points_at_the_user(tmp_path):
    import envlink
    from envlink.testing import make_grid

    # a grid read from a file: its cells go to the cell-series store (docs/store.md)
    g = make_grid(np.ones((3, 2, 2)), lat=[0.0, 1.0], lon=[10.0, 11.0])
    g.attrs = {"units": "degC"}
    g.to_dataset(name="v").to_netcdf(tmp_path / "g.nc")
    grid = envlink.open_grid(tmp_path / "g.nc")
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("a file, so no folder can be made under it\n")
    table = pd.DataFrame({"site_lat": [0.2], "site_lon": [10.3],
                          "period_start": ["2000-01-01"], "period_end": ["2000-02-28"]})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        envlink.attach(table, grid, name="v", cache_dir=str(blocker / "cache"))
    for w in _only(caught, errors.CacheWarning):
        assert w.filename == __file__


def test_meta_regression_warning_points_at_the_user():
    from envlink import MetaRegression

    data = pd.DataFrame({"y": [0.1, 0.3, np.nan, 0.2, 0.5], "v": [0.01, 0.02, 0.03, 0.02, 0.01]})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        MetaRegression().fit(data, effect="y", variance="v")
    for w in _only(caught, errors.MetaRegressionWarning):
        assert w.filename == __file__
