"""The ``nearest-valid`` choice is made once for the covariates of one call that share it.

Covariates over the same windows, on the same grid and rule, choose the same cells;
``attach_many`` makes that choice once (envlink/extract/rules/nearest_valid.py) and
every value and QA code must still equal one ``attach`` call per covariate (compared
exactly: the same series, the same arithmetic; the reference is envlink's own
single-covariate path).
"""

from __future__ import annotations

from pathlib import Path

import pytest

import envlink
from envlink.extract.rules import nearest_valid as nv

from .test_many import COVS, _singles
from .test_store import rows, write_grid


def test_one_choice_per_window_and_the_values_of_single_calls(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "sst.nc"
    write_grid(path)
    t = rows()
    grid = envlink.open_grid(path)
    ref = _singles(t, grid, "nearest-valid:150km")
    calls: list[int] = []
    real = nv.nearest_valid

    def counting(plan, *args, **kwargs):  # noqa: ANN001, ANN002, ANN003, ANN202
        calls.append(plan.n)
        return real(plan, *args, **kwargs)

    monkeypatch.setattr(nv, "nearest_valid", counting)
    got = envlink.attach_many(t, grid, COVS, spatial="nearest-valid:150km")
    # mean, max, min, std and the anomaly share the period's windows: one choice for them;
    # the two lags and the 12 months around the middle have windows of their own
    assert len(calls) == 4
    moved = ref["m_flags"].str.contains("nearest_valid_", regex=False)
    assert moved.any()  # the choice moved some rows: their codes are compared too
    cols = [c for c in ref.columns if c not in t.columns]
    assert list(got.columns) == list(ref.columns)
    for c in cols:
        assert got[c].equals(ref[c]), c
