"""Selection space (PCA by SVD), checked against scikit-learn's PCA."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.decomposition import PCA

from registry.errors import InputError
from registry.selection import SelectionSpace, selection_scores


def spectra_like(seed=0, n=120, d=50):
    rng = np.random.default_rng(seed)
    latent = rng.normal(size=(n, 4)) * [3.0, 1.5, 0.7, 0.2]
    return latent @ rng.normal(size=(4, d)) + 0.01 * rng.normal(size=(n, d)) + 1.0


def _align(A, B):
    """Flip columns of A to B's signs (PCA axes are defined up to sign)."""
    return A * np.sign(np.sum(A * B, axis=0))


def test_matches_sklearn_pca_for_a_fixed_number_of_components():
    # Source: sklearn.decomposition.PCA (explained_variance_ uses ddof=1).
    X = spectra_like()
    T, eig, space = selection_scores(X, n_components=3)
    ref = PCA(n_components=3, svd_solver="full").fit(X)
    np.testing.assert_allclose(eig, ref.explained_variance_, rtol=1e-10)
    np.testing.assert_allclose(space.explained_variance_ratio_, ref.explained_variance_ratio_,
                               rtol=1e-10)
    np.testing.assert_allclose(_align(T, ref.transform(X)), ref.transform(X), atol=1e-9)
    np.testing.assert_allclose(T.var(axis=0, ddof=1), eig, rtol=1e-10)


def test_explained_variance_choice_matches_sklearn():
    # Source: PCA(n_components=0.99) keeps the fewest components reaching 99 %.
    X = spectra_like(1)
    for share in (0.5, 0.9, 0.99, 0.999):
        space = SelectionSpace(explained_variance=share).fit(X)
        assert space.n_components_ == PCA(n_components=share, svd_solver="full").fit(
            X).n_components_


def test_fit_on_calibration_transform_candidates():
    # Source: sklearn PCA fitted on the same rows, then transform.
    X = spectra_like(2, 200)
    cal, cand = X[:60], X[60:]
    space = SelectionSpace(n_components=4).fit(cal)
    ref = PCA(n_components=4, svd_solver="full").fit(cal)
    T = space.transform(cand)
    np.testing.assert_allclose(_align(T, ref.transform(cand)), ref.transform(cand), atol=1e-9)
    assert space.get_params() == {"explained_variance": 0.99, "n_components": 4}


def test_sign_convention_is_independent_of_row_order():
    X = spectra_like(3)
    a = SelectionSpace(n_components=3).fit(X).components_
    b = SelectionSpace(n_components=3).fit(X[::-1]).components_
    np.testing.assert_allclose(a, b, atol=1e-9)


def test_bad_input():
    X = spectra_like()
    with pytest.raises(InputError, match="explained_variance"):
        SelectionSpace(explained_variance=1.5).fit(X)
    with pytest.raises(InputError, match="non-zero principal"):
        SelectionSpace(n_components=5).fit(X[:5])  # 5 centred rows have rank 4
    with pytest.raises(InputError, match="identical"):
        SelectionSpace().fit(np.ones((5, 3)))
    space = SelectionSpace(n_components=2).fit(X)
    with pytest.raises(InputError, match="fitted on 50"):
        space.transform(X[:, :40])
