"""Shared data for the chemometrics tests: data shipped with packages only."""

import numpy as np
import pytest
from chemotools.datasets import load_fermentation_test, load_fermentation_train
from sklearn.datasets import make_regression


@pytest.fixture(scope="session")
def fermentation():
    """Mid-IR spectra + HPLC glucose shipped with chemotools 0.5.0
    (Cabaneros Lopez et al.; 21 training spectra, ascending axis in cm-1)."""
    X, y = load_fermentation_train()
    axis = X.columns.to_numpy(dtype=np.float64)
    return X.to_numpy(dtype=np.float64), y["glucose"].to_numpy(dtype=np.float64), axis


@pytest.fixture(scope="session")
def fermentation_online():
    """Spectra from the on-line part of the same shipped data set (every 40th,
    skipping the few flat all-equal spectra it contains). Its HPLC table is on
    a different time grid, so no reference values are returned."""
    X, _ = load_fermentation_test()
    X = X.to_numpy(dtype=np.float64)
    X = X[X.std(axis=1) > 0]
    return X[::40]


@pytest.fixture(scope="session")
def low_rank_regression():
    """scikit-learn's make_regression with a low effective rank, plus a large
    common offset as spectra have (exercises centring precision)."""
    X, y = make_regression(n_samples=80, n_features=300, n_informative=40,
                           effective_rank=12, noise=0.5, random_state=7)
    return X + 5.0, y
