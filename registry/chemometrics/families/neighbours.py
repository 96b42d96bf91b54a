"""Nearest-neighbour look-up: the reference values of the closest calibration samples.

A new spectrum gets the reference value of its nearest calibration sample
or, with ``n_neighbors = k > 1``, the mean of the k nearest weighted by the
inverse distance (``weights="distance"``; a neighbour at distance 0 takes all
the weight, shared with any other at 0) or unweighted (``"uniform"``) —
the k-nearest-neighbour rule (Cover & Hart, IEEE Trans. Inf. Theory 13:21,
1967), the same rule as scikit-learn's ``KNeighborsRegressor``.

Space and metric:

``spectra``
    Euclidean distance between preprocessed spectra.
``scores``
    Mahalanobis distance between PCA scores (metric S⁻¹, S the covariance of
    the calibration scores), computed as the Euclidean distance of the
    scores divided by √λₐ. The PCA is the project's
    :class:`registry.selection.space.SelectionSpace`.

Distance limit (default): the largest distance from a calibration sample to
its nearest *other* calibration sample — the rule of the ``nearest_neighbour``
check in :mod:`registry.chemometrics.diagnostics`. A sample whose *nearest*
neighbour is farther than the limit lies in a gap of the calibration space:
it gets no value (NaN), only the ``nearest_neighbour`` flag. Otherwise the
value uses all k neighbours. The neighbours (calibration row indices), their
distances and values, and the range of their values are always reported.
"""

from __future__ import annotations

import numbers
from typing import Any

import numpy as np

from registry.chemometrics.families._state import take_arrays
from registry.chemometrics.families.checks import FamilyChecks
from registry.chemometrics.pls import check_xy
from registry.errors import InputError
from registry.selection.space import SelectionSpace

SPACES = ("spectra", "scores")
WEIGHTS = ("distance", "uniform")
FLAGS = ("nearest_neighbour",)
_BLOCK = 256  # query rows per distance block: bounded memory for large sets
_SPARE = 4


def _k_nearest(Z: np.ndarray, points: np.ndarray, k: int, exclude_self: bool = False):
    """Indices and Euclidean distances of the k nearest rows of ``points``, nearest first."""
    n_q = Z.shape[0]
    idx = np.empty((n_q, k), dtype=np.int64)
    dist = np.empty((n_q, k))
    sq = np.einsum("ij,ij->i", points, points)
    for start in range(0, n_q, _BLOCK):
        block = Z[start:start + _BLOCK]
        d2 = np.einsum("ij,ij->i", block, block)[:, None] + sq[None, :] - 2.0 * block @ points.T
        if exclude_self:
            rows = np.arange(block.shape[0])
            d2[rows, start + rows] = np.inf
        # a few spare candidates: the expansion above can misorder near-ties by rounding
        n_cand = min(k + _SPARE, points.shape[0])
        if n_cand < points.shape[0]:
            cand = np.argpartition(d2, n_cand - 1, axis=1)[:, :n_cand]
        else:
            cand = np.tile(np.arange(points.shape[0]), (block.shape[0], 1))
        if exclude_self:
            cand = np.where(cand == (start + np.arange(block.shape[0]))[:, None], -1, cand)
        # distances of the candidates recomputed directly: no cancellation error
        exact = np.linalg.norm(block[:, None, :] - points[cand], axis=2)
        exact[cand < 0] = np.inf
        order = np.lexsort((cand, exact), axis=1)[:, :k]
        idx[start:start + _BLOCK] = np.take_along_axis(cand, order, axis=1)
        dist[start:start + _BLOCK] = np.take_along_axis(exact, order, axis=1)
    return idx, dist


def weighted_mean(values: np.ndarray, distances: np.ndarray, weights: str) -> np.ndarray:
    """Row-wise mean of neighbour values, inverse-distance or uniform weights."""
    if weights == "uniform":
        return values.mean(axis=1)
    with np.errstate(divide="ignore"):
        w = 1.0 / distances
    at_zero = np.isinf(w)
    rows = at_zero.any(axis=1)
    w[rows] = at_zero[rows]
    return np.sum(w * values, axis=1) / np.sum(w, axis=1)


class NeighbourLookup:
    """Reference value(s) of the nearest calibration sample(s).

    Parameters
    ----------
    n_neighbors : int, default 1
    space : {"spectra", "scores"}, default "spectra"
        Euclidean on preprocessed spectra, or Mahalanobis on PCA scores.
    n_components : int, optional
        PCA components (``scores`` only); default: ``explained_variance``.
    explained_variance : float, default 0.99
        Share of variance the PCA keeps when ``n_components`` is not given.
    weights : {"distance", "uniform"}, default "distance"
    distance_limit : float, optional
        Default: the largest nearest-neighbour distance within the
        calibration set.

    Attributes
    ----------
    points_ : ndarray (n, d)
        Calibration samples in the working space (centred spectra, or
        scores divided by √λ).
    y_ : ndarray (n,)
    centre_ : ndarray (p,)
        Subtracted from spectra before distances (``spectra`` space; keeps
        the squared-distance expansion accurate for spectra with a large
        common offset).
    pca_ : SelectionSpace or None
    distance_limit_ : float
    n_samples_ : int
    """

    family = "neighbours"

    def __init__(self, n_neighbors: int = 1, space: str = "spectra",
                 n_components: int | None = None, explained_variance: float = 0.99,
                 weights: str = "distance", distance_limit: float | None = None):
        self.n_neighbors = n_neighbors
        self.space = space
        self.n_components = n_components
        self.explained_variance = explained_variance
        self.weights = weights
        self.distance_limit = distance_limit

    def _check_params(self):
        k = self.n_neighbors
        if isinstance(k, bool) or not isinstance(k, numbers.Integral) or k < 1:
            raise InputError(f"n_neighbors must be a positive integer, got {k!r}",
                             field="n_neighbors")
        if self.space not in SPACES:
            raise InputError(f"space must be one of {', '.join(SPACES)}", field="space")
        if self.weights not in WEIGHTS:
            raise InputError(f"weights must be one of {', '.join(WEIGHTS)}", field="weights")
        limit = self.distance_limit
        if limit is not None and (isinstance(limit, bool) or not isinstance(limit, numbers.Real)
                                  or not np.isfinite(limit) or limit < 0):
            raise InputError("distance_limit must be a finite number ≥ 0", field="distance_limit")

    def fit(self, X, y) -> "NeighbourLookup":
        """Store the calibration samples in the working space.

        Parameters
        ----------
        X : ndarray (n, p)
            Preprocessed calibration spectra.
        y : ndarray (n,)
            Their reference values.
        """
        self._check_params()
        X, y = check_xy(X, y)
        n = X.shape[0]
        if n < 2:
            raise InputError("need at least 2 calibration samples", field="X")
        if self.n_neighbors > n:
            raise InputError(f"n_neighbors={self.n_neighbors} exceeds the {n} calibration "
                             "samples", field="n_neighbors")
        if self.space == "scores":
            self.pca_ = SelectionSpace(explained_variance=self.explained_variance,
                                       n_components=self.n_components).fit(X)
            self.centre_ = np.zeros(X.shape[1])
        else:
            self.pca_ = None
            self.centre_ = X.mean(axis=0)
        self.points_ = np.ascontiguousarray(self._coordinates(X))
        self.y_ = y
        if self.distance_limit is None:
            _, d = _k_nearest(self.points_, self.points_, 1, exclude_self=True)
            self.distance_limit_ = float(d.max())
        else:
            self.distance_limit_ = float(self.distance_limit)
        self.n_samples_ = n
        return self

    def _coordinates(self, X: np.ndarray) -> np.ndarray:
        if self.pca_ is None:
            return X - self.centre_
        return self.pca_.transform(X) / np.sqrt(self.pca_.eigenvalues_)

    def _spectra(self, X) -> np.ndarray:
        X, _ = check_xy(np.atleast_2d(np.asarray(X, dtype=np.float64)))
        if X.shape[1] != self.centre_.size:
            raise InputError(f"spectra must have {self.centre_.size} preprocessed points, "
                             f"got {X.shape[1]}", field="X")
        return X

    def kneighbors(self, X) -> tuple[np.ndarray, np.ndarray]:
        """(distances (n, k), calibration row indices (n, k)), nearest first."""
        idx, dist = _k_nearest(self._coordinates(self._spectra(X)), self.points_,
                               int(self.n_neighbors))
        return dist, idx

    def check(self, X) -> FamilyChecks:
        """Values (NaN beyond the limit), neighbours and the distance flag."""
        dist, idx = self.kneighbors(X)
        values = self.y_[idx]
        beyond = dist[:, 0] > self.distance_limit_
        y_pred = weighted_mean(values, dist, self.weights)
        y_pred[beyond] = np.nan
        return FamilyChecks(
            y_pred=y_pred,
            values={"nn_distance": dist[:, 0], "neighbour_index": idx,
                    "neighbour_distance": dist, "neighbour_value": values,
                    "neighbour_range": values.max(axis=1) - values.min(axis=1)},
            limits={"distance_limit": self.distance_limit_},
            flags={"nearest_neighbour": beyond}, flag_order=FLAGS)

    def evidence(self) -> dict[str, Any]:
        """What is looked up: the rule, the space, the limit and the tested values."""
        return {"n_neighbors": int(self.n_neighbors), "space": self.space,
                "weights": self.weights, "distance_limit": self.distance_limit_,
                "distance_limit_given": self.distance_limit is not None,
                "n_components": None if self.pca_ is None else int(self.pca_.n_components_),
                "n_samples": self.n_samples_, "calibration_y": self.y_.copy()}

    def explain(self, x) -> dict[str, Any]:
        """One spectrum's neighbours (calibration rows, distances, reference values), their
        spread, the limit and the looked-up value (None beyond the limit)."""
        checks = self.check(self._spectra(x)[:1])
        rec = checks.records()[0]
        values = np.asarray(rec["neighbour_value"], dtype=np.float64)
        return {"neighbour_index": rec["neighbour_index"],
                "neighbour_distance": rec["neighbour_distance"],
                "neighbour_value": rec["neighbour_value"],
                "spread": rec["neighbour_range"],
                "sd": float(values.std(ddof=1)) if values.size > 1 else None,
                "distance_limit": rec["distance_limit"], "y_pred": rec["y_pred"],
                "flags": rec["flags"], "weights": self.weights}

    def predict(self, X) -> np.ndarray:
        """Looked-up values; NaN where the nearest neighbour is beyond the limit."""
        return self.check(X).y_pred

    # ----------------------------------------------------------- plain state
    def _array_names(self) -> tuple[str, ...]:
        base = ("points", "y", "centre")
        return base + (("pca_mean", "pca_components", "pca_eigenvalues")
                       if self.space == "scores" else ())

    def state_arrays(self) -> dict[str, np.ndarray]:
        out = {"points": self.points_, "y": self.y_, "centre": self.centre_}
        if self.pca_ is not None:
            out.update(pca_mean=self.pca_.mean_, pca_components=self.pca_.components_,
                       pca_eigenvalues=self.pca_.eigenvalues_)
        return {k: np.ascontiguousarray(v) for k, v in out.items()}

    def state_json(self) -> dict[str, Any]:
        return {"family": self.family, "n_neighbors": int(self.n_neighbors),
                "space": self.space,
                "n_components": None if self.n_components is None else int(self.n_components),
                "explained_variance": float(self.explained_variance), "weights": self.weights,
                "distance_limit_given": self.distance_limit is not None,
                "distance_limit": self.distance_limit_, "n_samples": self.n_samples_}

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> "NeighbourLookup":
        model = cls(n_neighbors=meta["n_neighbors"], space=meta["space"],
                    n_components=meta["n_components"],
                    explained_variance=meta["explained_variance"], weights=meta["weights"],
                    distance_limit=meta["distance_limit"] if meta["distance_limit_given"] else None)
        model._check_params()
        state = take_arrays(arrays, model._array_names(), cls.family)
        model.points_, model.y_, model.centre_ = state["points"], state["y"], state["centre"]
        model.pca_ = None
        if model.space == "scores":
            pca = SelectionSpace(explained_variance=model.explained_variance,
                                 n_components=model.n_components)
            pca.mean_, pca.components_ = state["pca_mean"], state["pca_components"]
            pca.eigenvalues_ = state["pca_eigenvalues"]
            pca.n_components_ = int(pca.eigenvalues_.size)
            model.pca_ = pca
        model.distance_limit_ = float(meta["distance_limit"])
        model.n_samples_ = int(meta["n_samples"])
        return model
