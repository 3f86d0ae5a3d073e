"""Bad input gives a clear ModelError / InputError, or a result whose warnings explain it."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from reference.bcg import table

from envlink.errors import InputError, ModelError
from envlink.metareg import MetaRegression, MetaRegressionWarning


@pytest.fixture
def bcg():
    return table()


def test_non_positive_variance_names_the_row(bcg):
    bcg.loc[4, "vi"] = 0.0
    with pytest.raises(ModelError, match=r"must be positive and finite; row 4 has 0\.0"):
        MetaRegression().fit(bcg, effect="yi", variance="vi")
    with pytest.raises(ModelError, match="row 4"):
        MetaRegression().fit(y=bcg["yi"].to_numpy(), v=bcg["vi"].to_numpy())


def test_too_few_effects(bcg):
    with pytest.raises(ModelError, match=r"k = 2 usable effects for p = 2 coefficients.*k > p"):
        MetaRegression(moderators="ablat").fit(bcg.iloc[:2], effect="yi", variance="vi")


def test_constant_and_collinear_moderators(bcg):
    bcg["one"] = 3.0
    bcg["ablat2"] = 2 * bcg["ablat"] + 1
    with pytest.raises(ModelError, match="'one' is constant"):
        MetaRegression(moderators="ablat + one").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(ModelError, match="'ablat2' is a linear combination.*collinear"):
        MetaRegression(moderators="ablat + ablat2").fit(bcg, effect="yi", variance="vi")


def test_identical_effects_boundary(bcg):
    bcg["yi"] = -0.5
    m = MetaRegression().fit(bcg, effect="yi", variance="vi")
    assert m.tau2_ == 0.0 and m.I2_ == 0.0
    d = m.to_dict()
    assert any("identical" in w for w in d["warnings"])
    assert any("lower bound 0" in w for w in d["warnings"])
    json.dumps(d, allow_nan=False)  # JSON-safe: no NaN anywhere


def test_non_convergence_is_reported(bcg):
    with pytest.warns(MetaRegressionWarning, match="did not converge in 1 iterations"):
        m = MetaRegression(moderators="ablat", max_iter=1).fit(bcg, effect="yi", variance="vi")
    assert not m.converged_ and not m.to_dict()["converged"]


def test_missing_rows_dropped_counted_and_kept_in_outputs(bcg):
    bcg.loc[2, "ablat"] = np.nan
    bcg.loc[7, "vi"] = np.nan
    with pytest.warns(MetaRegressionWarning, match=r"2 row\(s\) dropped.*rows 2, 7"):
        m = MetaRegression(moderators="ablat").fit(bcg, effect="yi", variance="vi")
    assert m.n_dropped_ == 2 and m.k_ == 11
    res = m.standardized_residuals()
    assert len(res) == 13 and list(res.index) == list(bcg.index)
    assert res["dropped"].tolist() == [i in (2, 7) for i in range(13)]
    assert res.loc[2, "z"] != res.loc[2, "z"]  # missing for the dropped row


def test_bad_options_and_columns(bcg):
    with pytest.raises(InputError, match="The 'method' parameter of MetaRegression must be one of"):
        MetaRegression(method="XX").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(InputError, match="The 'test' parameter"):
        MetaRegression(test="f").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(InputError, match="'ablt' is not in the table. Did you mean 'ablat'"):
        MetaRegression(moderators="ablt").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(InputError, match="Cannot parse the moderator formula"):
        MetaRegression(moderators="ablat +").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(InputError, match="Column 'yy' is not in the table"):
        MetaRegression().fit(bcg, effect="yy", variance="vi")
    bcg["txt"] = bcg["yi"].astype(str)
    bcg.loc[3, "txt"] = "n/a?"
    with pytest.raises(InputError, match=r"'txt' must hold numbers; row 3 holds 'n/a\?'"):
        MetaRegression().fit(bcg, effect="txt", variance="vi")


def test_unfitted_use_is_a_clear_error():
    m = MetaRegression()
    with pytest.raises(ModelError, match="not fitted yet"):
        m.to_dict()
    with pytest.raises(AttributeError, match="no fitted attribute 'coef_'.*call fit"):
        _ = m.coef_
    assert m.get_params()["method"] == "REML"  # options stored as given


def test_predict_unknown_level(bcg):
    m = MetaRegression(moderators="C(alloc)").fit(bcg, effect="yi", variance="vi")
    with pytest.raises(InputError, match="Cannot build moderators for predict"):
        m.predict(pd.DataFrame({"alloc": ["lottery"]}))
    p = m.predict(pd.DataFrame({"alloc": ["random", "systematic"]}))
    assert list(p.columns) == ["estimate", "se", "ci_low", "ci_high", "pi_low", "pi_high"]


def test_permutation_needs_a_moderator(bcg):
    m = MetaRegression().fit(bcg, effect="yi", variance="vi")
    with pytest.raises(ModelError, match="at least one moderator"):
        m.permutation_test(10, seed=1)
