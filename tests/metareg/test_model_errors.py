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
    bcg.loc[4, "es_var"] = 0.0  # the fifth data row: row 5, as envlink counts rows (from 1)
    with pytest.raises(ModelError, match=r"must be positive and finite; row 5 has 0\.0"):
        MetaRegression().fit(bcg, effect="es", variance="es_var")
    with pytest.raises(ModelError, match="row 5 has"):
        MetaRegression().fit(y=bcg["es"].to_numpy(), v=bcg["es_var"].to_numpy())


def test_too_few_effects(bcg):
    with pytest.raises(ModelError, match=r"k = 2 usable effects for p = 2 coefficients.*k > p"):
        MetaRegression(moderators="latitude_abs").fit(bcg.iloc[:2], effect="es", variance="es_var")


def test_constant_and_collinear_moderators(bcg):
    bcg["one"] = 3.0
    bcg["lat2"] = 2 * bcg["latitude_abs"] + 1
    with pytest.raises(ModelError, match="'one' is constant"):
        MetaRegression(moderators="latitude_abs + one").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(ModelError, match="'lat2' is a linear combination.*collinear"):
        MetaRegression(moderators="latitude_abs + lat2").fit(bcg, effect="es", variance="es_var")


def test_identical_effects_boundary(bcg):
    bcg["es"] = -0.5
    m = MetaRegression().fit(bcg, effect="es", variance="es_var")
    assert m.tau2_ == 0.0 and m.I2_ == 0.0
    d = m.to_dict()
    assert any("identical" in w for w in d["warnings"])
    assert any("lower bound 0" in w for w in d["warnings"])
    json.dumps(d, allow_nan=False)  # JSON-safe: no NaN anywhere


def test_non_convergence_is_reported(bcg):
    with pytest.warns(MetaRegressionWarning, match="did not converge in 1 iterations"):
        m = MetaRegression(moderators="latitude_abs", max_iter=1).fit(bcg, effect="es", variance="es_var")
    assert not m.converged_ and not m.to_dict()["model"]["converged"]


def test_missing_rows_dropped_counted_and_kept_in_outputs(bcg):
    bcg.loc[2, "latitude_abs"] = np.nan
    bcg.loc[7, "es_var"] = np.nan
    with pytest.warns(MetaRegressionWarning, match=r"2 row\(s\) dropped.*\(rows 3, 8\)\.$"):
        m = MetaRegression(moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    assert m.n_dropped_ == 2 and m.k_ == 11
    res = m.standardized_residuals()
    assert len(res) == 13 and list(res.index) == list(bcg.index)
    assert res["dropped"].tolist() == [i in (2, 7) for i in range(13)]
    assert res.loc[2, "z"] != res.loc[2, "z"]  # missing for the dropped row


def test_bad_options_and_columns(bcg):
    with pytest.raises(InputError, match="The 'method' parameter of MetaRegression must be one of"):
        MetaRegression(method="XX").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="The 'test' parameter"):
        MetaRegression(test="f").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="'latitud_abs' is not in the table. Did you mean 'latitude_abs'"):
        MetaRegression(moderators="latitud_abs").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="Cannot parse the moderator formula"):
        MetaRegression(moderators="latitude_abs +").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="Column 'yy' is not in the table"):
        MetaRegression().fit(bcg, effect="yy", variance="es_var")
    bcg["txt"] = bcg["es"].astype(str)
    bcg.loc[3, "txt"] = "n/a?"
    with pytest.raises(InputError, match=r"'txt' must hold numbers; row 4 holds 'n/a\?'"):
        MetaRegression().fit(bcg, effect="txt", variance="es_var")


def test_unfitted_use_is_a_clear_error():
    m = MetaRegression()
    with pytest.raises(ModelError, match="not fitted yet"):
        m.to_dict()
    with pytest.raises(AttributeError, match="no fitted attribute 'coef_'.*call fit"):
        _ = m.coef_
    assert m.get_params()["method"] == "REML"  # options stored as given


def test_predict_unknown_level(bcg):
    m = MetaRegression(moderators="C(allocation)").fit(bcg, effect="es", variance="es_var")
    with pytest.raises(InputError, match="Cannot build moderators for predict"):
        m.predict(pd.DataFrame({"allocation": ["lottery"]}))
    p = m.predict(pd.DataFrame({"allocation": ["random", "systematic"]}))
    assert list(p.columns) == ["estimate", "se", "ci_low", "ci_high", "pi_low", "pi_high"]


def test_permutation_needs_a_moderator(bcg):
    m = MetaRegression().fit(bcg, effect="es", variance="es_var")
    with pytest.raises(ModelError, match="at least one moderator"):
        m.permutation_test(10, seed=1)


def test_rows_are_counted_from_1_with_labels_for_a_custom_index(bcg):
    # rows count from 1 (the first data row is row 1), as in locate and effects messages;
    # a DataFrame whose index is not 0, 1, ... also gets its labels
    bcg.index = [f"t{i + 1}" for i in range(13)]
    bcg.loc["t3", "latitude_abs"] = np.nan
    bcg.loc["t13", "es"] = np.nan
    with pytest.warns(MetaRegressionWarning,
                      match=r"2 row\(s\) dropped .* \(rows 3, 13 \(index 't3', 't13'\)\)\.$"):
        m = MetaRegression(moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    assert m.standardized_residuals().index.tolist() == list(bcg.index)
    bcg.loc["t5", "es_var"] = -1.0
    with pytest.raises(ModelError, match=r"row 5 \(index 't5'\) has -1\.0"):
        MetaRegression().fit(bcg, effect="es", variance="es_var")
    y = bcg["es"].fillna(0).to_numpy()
    with pytest.raises(ModelError, match=r"Effect 'y' must be finite; row 2 has inf"):
        MetaRegression().fit(y=np.r_[0.1, np.inf, y[2:]], v=np.full(13, 0.1))


def test_effect_and_variance_written_as_text_are_read(bcg):
    # decimal commas and U+2212 MINUS SIGN (Unicode 15, ch. 6.2), as envlink.tables reads them
    txt = bcg.assign(es=[f"{v:.6f}".replace(".", ",").replace("-", "\u2212") for v in bcg["es"]],
                     es_var=[f"{v:.6f}".replace(".", ",") for v in bcg["es_var"]])
    ref = MetaRegression(moderators="latitude_abs").fit(bcg.round({"es": 6, "es_var": 6}), effect="es",
                                                 variance="es_var")
    m = MetaRegression(moderators="latitude_abs").fit(txt, effect="es", variance="es_var")
    np.testing.assert_allclose(m.coef_, ref.coef_, rtol=1e-12)


def test_warning_class_is_an_envlink_warning():
    import envlink.metareg
    from envlink.errors import EnvlinkWarning

    assert issubclass(MetaRegressionWarning, EnvlinkWarning)
    assert envlink.metareg.MetaRegressionWarning is MetaRegressionWarning
    assert "MetaRegressionWarning" in envlink.metareg.__all__
