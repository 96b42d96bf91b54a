"""Strategy comparison harness on a make_regression-style linear problem
(scikit-learn LinearRegression as the model)."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import make_regression
from sklearn.linear_model import LinearRegression

from registry.errors import InputError
from registry.selection import compare_selection_strategies, rmsep


def ols_fit_predict(X_cal, y_cal, X_test):
    return LinearRegression().fit(X_cal, y_cal).predict(X_test)


def test_rmsep_definition():
    # RMSEP = sqrt(mean((ŷ - y)²)): errors 3 and 4 give sqrt(12.5) (hand arithmetic).
    assert rmsep([0.0, 0.0], [3.0, -4.0]) == pytest.approx(np.sqrt(12.5))


def test_noise_free_linear_data_is_predicted_exactly_by_every_strategy():
    # Least squares recovers an exact linear law from any non-singular design
    # with at least d + 1 rows (linear algebra).
    X, y = make_regression(n_samples=300, n_features=4, noise=0.0, random_state=0)
    result = compare_selection_strategies(X[:200], y[:200], X[200:], y[200:], ks=[6, 12],
                                          n_draws=3, fit_predict=ols_fit_predict,
                                          n_components=4, random_state=0)
    assert set(result) == {"kennard-stone", "d-optimal", "random"}
    for per_k in result.values():
        assert set(per_k) == {6, 12}
        assert max(per_k.values()) < 1e-8


def test_d_optimal_beats_random_for_least_squares_on_noisy_data():
    # D-optimal designs minimise the generalised variance of the least-squares
    # coefficients (Fedorov 1972), so on average their prediction error is lower
    # than that of random subsets of the same size.
    X, y = make_regression(n_samples=600, n_features=3, noise=20.0, random_state=1)
    result = compare_selection_strategies(X[:400], y[:400], X[400:], y[400:], ks=[8],
                                          n_draws=20, fit_predict=ols_fit_predict,
                                          n_components=3, random_state=1,
                                          strategies=("d-optimal", "random"))
    assert result["d-optimal"][8] < result["random"][8]


def test_bad_arguments():
    X, y = make_regression(n_samples=50, n_features=3, random_state=0)
    with pytest.raises(InputError, match="unknown strategy"):
        compare_selection_strategies(X, y, X, y, [5], 1, ols_fit_predict, strategies=("foo",))
    with pytest.raises(InputError, match="one value per row"):
        compare_selection_strategies(X, y[:-1], X, y, [5], 1, ols_fit_predict)
