"""The selection space: PCA scores shared by calibration and candidate spectra.

Kennard–Stone (Mahalanobis) and D-optimal selection work on a few PCA
scores rather than on thousands of absorbances. Fit the space once (on the
calibration set, or on calibration + candidates) and project every other
set with :meth:`SelectionSpace.transform`, so all sets live in one space.

PCA by singular value decomposition of the mean-centred data (Jolliffe,
*Principal Component Analysis*, 2nd ed., Springer 2002, §3.5).
"""

from __future__ import annotations

import numbers

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from registry.errors import InputError
from registry.selection._checks import check_count, check_matrix


class SelectionSpace(TransformerMixin, BaseEstimator):
    """PCA score space for sample selection.

    Parameters
    ----------
    explained_variance : float, default 0.99
        Keep the fewest components whose cumulative share of the variance
        reaches this value (0 < value <= 1). Ignored when ``n_components``
        is given.
    n_components : int, optional
        Fixed number of components.

    Attributes
    ----------
    mean_ : ndarray of shape (d,)
        Column mean of the rows the space was fitted on.
    components_ : ndarray of shape (A, d)
        Loadings (orthonormal rows); each row's largest-magnitude entry is
        positive, so the signs do not depend on the SVD routine.
    eigenvalues_ : ndarray of shape (A,)
        Score variances (ddof=1), i.e. the λₐ of the Mahalanobis distance.
    explained_variance_ratio_ : ndarray of shape (A,)
        Share of the total variance per component.
    n_components_ : int
        A, the number of components kept.
    n_samples_fit_ : int
        Rows the space was fitted on.
    """

    def __init__(self, explained_variance: float = 0.99, n_components: int | None = None):
        self.explained_variance = explained_variance
        self.n_components = n_components

    def fit(self, X, y=None):
        """Fit the PCA on the rows of ``X`` (preprocessed spectra)."""
        X = check_matrix(X, "X", min_rows=2)
        ev = self.explained_variance
        if isinstance(ev, bool) or not isinstance(ev, numbers.Real) or not 0 < ev <= 1:
            raise InputError(f"explained_variance must be in (0, 1], got {ev!r}",
                             field="explained_variance")
        mean = X.mean(axis=0, dtype=np.float64)
        centred = X.astype(np.float64) - mean
        _, s, vt = np.linalg.svd(centred, full_matrices=False)
        n = X.shape[0]
        eig = s**2 / (n - 1)
        total = eig.sum()
        if total <= 0:
            raise InputError("all rows of X are identical: there is no variance to build a "
                             "selection space from", field="X")
        # Components beyond the numerical rank carry only rounding noise.
        usable = int(np.sum(s > s[0] * max(X.shape) * np.finfo(np.float64).eps))
        if self.n_components is not None:
            a = check_count(self.n_components, "n_components")
            if a > usable:
                raise InputError(f"n_components={a} but X has only {usable} non-zero "
                                 "principal component(s)", field="n_components")
        else:
            ratio = np.cumsum(eig) / total
            a = int(np.searchsorted(ratio, ev - 1e-12) + 1)
            a = min(a, usable)
        vt = vt[:a]
        signs = np.sign(vt[np.arange(a), np.argmax(np.abs(vt), axis=1)])
        self.mean_ = mean
        self.components_ = vt * signs[:, None]
        self.eigenvalues_ = eig[:a]
        self.explained_variance_ratio_ = eig[:a] / total
        self.n_components_ = a
        self.n_samples_fit_ = n
        return self

    def transform(self, X):
        """Scores ``T = (X − mean_) · components_ᵀ`` of any rows of ``X``."""
        check_is_fitted(self, "components_")
        X = check_matrix(X, "X")
        if X.shape[1] != self.mean_.size:
            raise InputError(f"X has {X.shape[1]} columns but the selection space was fitted "
                             f"on {self.mean_.size} (same axis and preprocessing needed)",
                             field="X")
        return (X.astype(np.float64) - self.mean_) @ self.components_.T


def selection_scores(X_preprocessed, *, explained_variance: float = 0.99,
                     n_components: int | None = None):
    """Fit a :class:`SelectionSpace` on ``X_preprocessed`` and return its scores.

    Returns
    -------
    T : ndarray of shape (n, A)
        Scores of the rows of ``X_preprocessed``.
    eigenvalues : ndarray of shape (A,)
        Score variances, for ``kennard_stone(..., metric="mahalanobis",
        eigenvalues=...)``.
    space : SelectionSpace
        The fitted space; ``space.transform(other_rows)`` projects further
        spectra (e.g. candidates when the space was fitted on calibration).
    """
    space = SelectionSpace(explained_variance=explained_variance,
                           n_components=n_components).fit(X_preprocessed)
    return space.transform(X_preprocessed), space.eigenvalues_, space
