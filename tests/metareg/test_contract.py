"""MetaRegression's estimator contract: declared attributes, results that do not depend on what
was read before, options named by the statistics that need them, and parameters handled as
scikit-learn's estimator contract describes (get_params / set_params / clone), without
depending on scikit-learn.

Data: the BCG trials (tests/reference/bcg.py). Numbers are compared only with the same
model's own outputs (common practice for idempotence checks).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from reference.bcg import table

from envlink.errors import InputError, ModelError
from envlink.metareg import MetaRegression, NotFittedError

DERIVED = ("coefficients_", "tau2_ci_", "R2_", "notes_", "I2_components_", "n_clusters_")
FITTED = ("coef_", "se_", "vcov_", "vcov_model_", "tau2_", "I2_", "H2_", "Q_E_", "Q_M_",
          "k_", "p_", "terms_", "method_", "test_", "df_", "included_", "design_", "warnings_")


def _clone(model: MetaRegression) -> MetaRegression:
    """What sklearn.base.clone does: a new object from deep copies of get_params(deep=False)."""
    params = {k: copy.deepcopy(v) for k, v in model.get_params(deep=False).items()}
    new = type(model)(**params)
    for name, value in new.get_params(deep=False).items():
        assert value is params[name]  # the constructor stores parameters as given
    return new


def _read_everything(m: MetaRegression) -> None:
    for name in dir(m):
        if name.endswith("_") and not name.startswith("_"):
            try:
                getattr(m, name)
            except AttributeError as exc:  # a statistic the options do not define
                assert isinstance(exc, ModelError)
    m.summary()
    m.standardized_residuals()
    m.leave_one_out()
    m.cooks_distance()
    m.predict()


def test_dir_lists_fitted_and_derived_statistics() -> None:
    names = set(dir(MetaRegression()))
    assert set(DERIVED) | set(FITTED) <= names
    assert MetaRegression.coef_.__doc__ and MetaRegression.R2_.__doc__


def test_unfitted_use_raises_a_clear_error() -> None:
    m = MetaRegression(moderators="latitude_abs")
    for name in (*FITTED, *DERIVED):
        assert not hasattr(m, name)
        with pytest.raises(NotFittedError, match="not fitted yet.*call fit"):
            getattr(m, name)
    for call in (m.to_dict, m.summary, m.predict, m.standardized_residuals, m.leave_one_out):
        with pytest.raises(NotFittedError, match="not fitted yet"):
            call()


@pytest.mark.parametrize("options", [
    {"moderators": "latitude_abs"},
    {"moderators": "latitude_abs", "tau2": 0.05},  # R² carries a note
    {"moderators": "latitude_abs", "nested": "study", "test": "knapp-hartung"},  # tau2_ci carries one
    {"moderators": "latitude_abs", "method": "paule-mandel", "cluster": "pair"},
])
def test_to_dict_and_summary_do_not_depend_on_what_was_read(options) -> None:
    bcg = table().assign(study=[i // 2 for i in range(13)], pair=[i // 4 for i in range(13)])
    first = MetaRegression(**options).fit(bcg, effect="es", variance="es_var")
    reference, text = first.to_dict(), str(first.summary())
    other = MetaRegression(**options).fit(bcg, effect="es", variance="es_var")
    warnings_before = list(other.warnings_)
    _read_everything(other)
    assert other.to_dict() == reference
    assert str(other.summary()) == text
    assert other.warnings_ == warnings_before
    assert first.to_dict() == reference  # and twice in a row
    assert other.notes_ == reference["warnings"][: len(other.notes_)]


def test_statistics_needing_an_option_name_it() -> None:
    m = MetaRegression(moderators="latitude_abs").fit(table(), effect="es", variance="es_var")
    with pytest.raises(ModelError, match=r"I2_components_ is defined only for a model fitted "
                                         r"with nested=") as info:
        _ = m.I2_components_
    assert "call fit" not in str(info.value) and isinstance(info.value, AttributeError)
    with pytest.raises(ModelError, match="n_clusters_ .* cluster="):
        _ = m.n_clusters_
    assert not hasattr(m, "I2_components_")


def test_constructor_is_keyword_only() -> None:
    with pytest.raises(TypeError):
        MetaRegression("REML")  # type: ignore[misc]


def test_get_params_set_params_round_trip_like_clone() -> None:
    m = MetaRegression(method="dl", moderators="latitude_abs", level=0.9, tol=1e-9)
    params = m.get_params(deep=True)
    assert params == m.get_params(deep=False)
    assert list(params) == ["method", "test", "tau2", "moderators", "intercept", "nested",
                            "cluster", "truncate_kh", "level", "max_iter", "tol"]
    twin = _clone(m)
    assert twin.get_params() == params and twin is not m
    assert twin.set_params(**params) is twin
    a = m.fit(table(), effect="es", variance="es_var").to_dict()
    b = twin.fit(table(), effect="es", variance="es_var").to_dict()
    assert a == b


def test_set_params_unfits_and_refuses_unknown_names() -> None:
    bcg = table()
    m = MetaRegression(moderators="latitude_abs").fit(bcg, effect="es", variance="es_var")
    assert hasattr(m, "coef_") and m.R2_ is not None
    with pytest.raises(InputError, match=r"The '\*\*params' parameter of MetaRegression.set_params "
                                         r"must be .*; got 'methd'\. Did you mean 'method'"):
        m.set_params(methd="ML")
    assert hasattr(m, "coef_") and m.method == "REML"  # nothing changed
    assert m.set_params(method="ML") is m
    assert not hasattr(m, "coef_") and not hasattr(m, "R2_")
    with pytest.raises(NotFittedError):
        m.to_dict()
    refit = m.fit(bcg, effect="es", variance="es_var").to_dict()
    fresh = MetaRegression(moderators="latitude_abs", method="ML").fit(bcg, effect="es", variance="es_var")
    assert refit == fresh.to_dict() and refit["model"]["tau2_method"] == "ML"


def test_helpers_use_public_state_only() -> None:
    # the fitted design is public, and refitting it reproduces the model
    m = MetaRegression(moderators="latitude_abs").fit(table(), effect="es", variance="es_var")
    again = _clone(m).fit(m.design_)
    np.testing.assert_array_equal(again.coef_, m.coef_)
    assert again.to_dict() == m.to_dict()
