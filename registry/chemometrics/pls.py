"""PLS1 regression on top of ikpls (improved kernel PLS, algorithm 1).

Dayal & MacGregor, "Improved PLS algorithms", J. Chemometrics 11:73-85 (1997).
X and y are mean-centred, never scaled (ikpls autoscales by default, so the
flags are passed explicitly). Predictions for every component count come from
one fit.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
from ikpls.numpy import PLS
from sklearn.base import BaseEstimator, RegressorMixin

from registry.errors import InputError


def make_ikpls() -> PLS:
    """An ikpls model with plain mean-centring (the library default autoscales)."""
    return PLS(algorithm=1, center_X=True, center_Y=True, scale_X=False, scale_Y=False)


def check_xy(X: Any, y: Any = None) -> tuple[np.ndarray, np.ndarray | None]:
    """Convert to float64 and check shapes and finiteness, naming the culprit."""
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2:
        raise InputError(f"X must be a 2-D array, got {X.ndim} dimensions", field="X")
    if not np.all(np.isfinite(X)):
        row = int(np.argwhere(~np.isfinite(X))[0, 0])
        raise InputError(f"X row {row} contains non-finite values", field="X")
    if y is None:
        return X, None
    y = np.asarray(y, dtype=np.float64)
    if y.ndim == 2 and y.shape[1] == 1:
        y = y[:, 0]
    if y.ndim != 1:
        raise InputError("y must be a 1-D array (PLS1: one property)", field="y")
    if y.shape[0] != X.shape[0]:
        raise InputError(f"X has {X.shape[0]} rows but y has {y.shape[0]} values", field="y")
    if not np.all(np.isfinite(y)):
        row = int(np.flatnonzero(~np.isfinite(y))[0])
        raise InputError(f"y value {row} is not finite", field="y")
    return X, y


class PLSRegressor(RegressorMixin, BaseEstimator):
    """PLS1 regression with mean-centring, all component counts from one fit.

    Parameters
    ----------
    n_components : int
        Largest number of latent variables fitted; ``predict`` may use fewer.

    Attributes
    ----------
    coef_ : ndarray of shape (n_components, n_features)
        Row ``a - 1`` holds the regression vector of the ``a``-component
        model, applied to mean-centred X: ``y = (x - x_mean_) @ coef_[a-1] + y_mean_``.
    intercept_ : ndarray of shape (n_components,)
        ``y_mean_ - x_mean_ @ coef_[a-1]`` (for use on uncentred X).
    x_mean_ : ndarray of shape (n_features,)
    y_mean_ : float
    x_weights_ : ndarray of shape (n_features, n_components)
        W, unit-norm weights of the deflated X.
    x_loadings_ : ndarray of shape (n_features, n_components)
        P, X loadings (X_c ≈ T P').
    x_rotations_ : ndarray of shape (n_features, n_components)
        R = W (P'W)⁻¹, so that T = X_c R for new data.
    x_scores_ : ndarray of shape (n_samples, n_components)
        T, calibration scores.
    y_loadings_ : ndarray of shape (n_components,)
        q, y loadings.
    n_stable_components_ : int
        Components before X ran out of rank; later ones repeat the last
        stable regression vector (ikpls behaviour).

    References
    ----------
    Dayal, B. S. & MacGregor, J. F. (1997). Improved PLS algorithms.
    J. Chemometrics 11, 73-85.
    """

    def __init__(self, n_components: int = 2):
        self.n_components = n_components

    def fit(self, X, y) -> "PLSRegressor":
        X, y = check_xy(X, y)
        n, k = X.shape
        A = self.n_components
        if isinstance(A, bool) or not isinstance(A, (int, np.integer)) or A < 1:
            raise InputError(f"n_components must be a positive integer, got {A!r}",
                             field="n_components")
        if A > min(n - 1, k):
            raise InputError(f"n_components={A} exceeds min(n_samples - 1, n_features) = "
                             f"{min(n - 1, k)}", field="n_components")
        model = make_ikpls()
        with warnings.catch_warnings():
            # rank exhaustion is reported through n_stable_components_ instead
            warnings.simplefilter("ignore", UserWarning)
            model.fit(X, y, int(A))
        self.coef_ = np.ascontiguousarray(model.B[:, :, 0])
        self.x_mean_ = np.ascontiguousarray(model.X_mean[0])
        self.y_mean_ = float(model.Y_mean[0, 0])
        self.intercept_ = self.y_mean_ - self.coef_ @ self.x_mean_
        self.x_weights_ = model.W
        self.x_loadings_ = model.P
        self.x_rotations_ = model.R
        self.x_scores_ = model.T
        self.y_loadings_ = model.Q[0].copy()
        self.n_stable_components_ = int(model.max_stable_components)
        self.n_features_in_ = k
        return self

    def _check_components(self, n_components: int | None) -> int:
        a = self.coef_.shape[0] if n_components is None else n_components
        if isinstance(a, bool) or not isinstance(a, (int, np.integer)) or not 1 <= a <= self.coef_.shape[0]:
            raise InputError(f"n_components must be between 1 and {self.coef_.shape[0]}, "
                             f"got {n_components!r}", field="n_components")
        return int(a)

    def _check_predict_X(self, X) -> np.ndarray:
        X, _ = check_xy(X)
        if X.shape[1] != self.x_mean_.shape[0]:
            raise InputError(f"X has {X.shape[1]} columns, the model was fitted on "
                             f"{self.x_mean_.shape[0]}", field="X")
        return X

    def predict(self, X, n_components: int | None = None) -> np.ndarray:
        """Predict y with ``n_components`` latent variables (default: all fitted).

        Always one matrix-vector product on centred X, so a model rebuilt from
        its stored arrays gives bit-identical predictions.
        """
        a = self._check_components(n_components)
        X = self._check_predict_X(X)
        return (X - self.x_mean_) @ self.coef_[a - 1] + self.y_mean_

    def predict_all(self, X) -> np.ndarray:
        """Predictions for every component count, shape (n_samples, n_components)."""
        X = self._check_predict_X(X)
        return (X - self.x_mean_) @ self.coef_.T + self.y_mean_

    def transform(self, X, n_components: int | None = None) -> np.ndarray:
        """Scores T = (X - x_mean_) R for the first ``n_components`` components."""
        a = self._check_components(n_components)
        X = self._check_predict_X(X)
        return (X - self.x_mean_) @ self.x_rotations_[:, :a]

    # ----------------------------------------------------------- plain state
    def state_arrays(self, n_components: int | None = None) -> dict[str, np.ndarray]:
        """Arrays needed to predict with ``n_components`` (default: all) and to
        compute scores/residuals; no calibration scores (they stay with the
        diagnostics)."""
        a = self._check_components(n_components)
        return {
            "coef": np.ascontiguousarray(self.coef_[:a]),
            "x_mean": np.ascontiguousarray(self.x_mean_),
            "y_mean": np.array([self.y_mean_]),
            "x_weights": np.ascontiguousarray(self.x_weights_[:, :a]),
            "x_loadings": np.ascontiguousarray(self.x_loadings_[:, :a]),
            "x_rotations": np.ascontiguousarray(self.x_rotations_[:, :a]),
            "y_loadings": np.ascontiguousarray(self.y_loadings_[:a]),
        }

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], n_stable_components: int | None = None
                   ) -> "PLSRegressor":
        """Rebuild a fitted regressor (without calibration scores) from :meth:`state_arrays`."""
        coef = np.ascontiguousarray(arrays["coef"], dtype=np.float64)
        model = cls(n_components=int(coef.shape[0]))
        model.coef_ = coef
        model.x_mean_ = np.ascontiguousarray(arrays["x_mean"], dtype=np.float64)
        model.y_mean_ = float(np.asarray(arrays["y_mean"]).reshape(-1)[0])
        model.intercept_ = model.y_mean_ - model.coef_ @ model.x_mean_
        model.x_weights_ = np.ascontiguousarray(arrays["x_weights"], dtype=np.float64)
        model.x_loadings_ = np.ascontiguousarray(arrays["x_loadings"], dtype=np.float64)
        model.x_rotations_ = np.ascontiguousarray(arrays["x_rotations"], dtype=np.float64)
        model.y_loadings_ = np.ascontiguousarray(arrays["y_loadings"], dtype=np.float64)
        model.x_scores_ = None
        model.n_stable_components_ = (coef.shape[0] if n_stable_components is None
                                      else int(n_stable_components))
        model.n_features_in_ = model.x_mean_.shape[0]
        k = model.x_mean_.shape[0]
        for name in ("x_weights_", "x_loadings_", "x_rotations_"):
            if getattr(model, name).shape != (k, coef.shape[0]):
                raise InputError(f"PLS state {name[:-1]!r} has the wrong shape", field=name[:-1])
        if coef.shape[1] != k:
            raise InputError("PLS state 'coef' does not match 'x_mean'", field="coef")
        return model
