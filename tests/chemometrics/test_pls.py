"""PLS1 regressor against scikit-learn's PLSRegression."""

import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression

from registry.chemometrics import PLSRegressor
from registry.errors import InputError


@pytest.mark.parametrize("data", ["fermentation", "low_rank_regression"])
def test_predictions_equal_sklearn_for_every_component_count(data, request):
    # source: sklearn.cross_decomposition.PLSRegression(scale=False) (NIPALS,
    # Wold et al. 2001); same model, so predictions agree to rounding
    fixture = request.getfixturevalue(data)
    X, y = fixture[0], fixture[1]
    train, test = slice(0, None, 2), slice(1, None, 2)
    A_max = 15 if X[train].shape[0] > 16 else X[train].shape[0] - 2
    ours = PLSRegressor(n_components=A_max).fit(X[train], y[train])
    all_pred = ours.predict_all(X[test])
    for a in range(1, A_max + 1):
        ref = PLSRegression(n_components=a, scale=False).fit(X[train], y[train])
        expected = ref.predict(X[test]).ravel()
        got = ours.predict(X[test], n_components=a)
        rel = np.max(np.abs(got - expected)) / np.max(np.abs(expected))
        assert rel < 1e-8, (a, rel)
        np.testing.assert_allclose(all_pred[:, a - 1], got, rtol=1e-12, atol=1e-10)
        # regression vector on uncentred X: sklearn's coef_ is (1, n_features)
        np.testing.assert_allclose(ours.coef_[a - 1], ref.coef_.ravel(), rtol=1e-7,
                                   atol=1e-9 * np.abs(ref.coef_).max())


def test_scores_and_loadings_match_sklearn_up_to_sign(low_rank_regression):
    # source: PLSRegression attributes x_scores_, x_loadings_, x_weights_,
    # x_rotations_ (same normalisation: unit-norm weights)
    X, y = low_rank_regression
    A = 6
    ours = PLSRegressor(A).fit(X, y)
    ref = PLSRegression(A, scale=False).fit(X, y)
    for name in ("x_weights_", "x_loadings_", "x_rotations_", "x_scores_"):
        a, b = getattr(ours, name), getattr(ref, name)
        sign = np.sign(np.sum(a * b, axis=0))
        np.testing.assert_allclose(a * sign, b, rtol=1e-7, atol=1e-8 * np.abs(b).max())
    # T = (X - mean) R, the identity the diagnostics rely on
    np.testing.assert_allclose(ours.transform(X), ours.x_scores_, atol=1e-9)


def test_state_round_trip_predicts_bit_identically(low_rank_regression):
    # source: artifact contract (plain arrays reproduce predictions exactly)
    X, y = low_rank_regression
    model = PLSRegressor(8).fit(X, y)
    state = {k: v.copy() for k, v in model.state_arrays().items()}
    again = PLSRegressor.from_state(state)
    for a in (1, 5, 8):
        np.testing.assert_array_equal(again.predict(X, a), model.predict(X, a))


def test_bad_inputs_are_named(low_rank_regression):
    X, y = low_rank_regression
    with pytest.raises(InputError, match="rows but y has"):
        PLSRegressor(2).fit(X, y[:-1])
    with pytest.raises(InputError) as info:
        PLSRegressor(500).fit(X, y)
    assert info.value.field == "n_components"
    bad = X.copy()
    bad[3, 4] = np.nan
    with pytest.raises(InputError, match="row 3"):
        PLSRegressor(2).fit(bad, y)
    model = PLSRegressor(3).fit(X, y)
    with pytest.raises(InputError, match="between 1 and 3"):
        model.predict(X, n_components=4)
