"""Ranking a candidate pool for reference testing, one function per selection method.

The situation is the lab's: an existing calibration set (spectra with
reference values, possibly empty) and a pool of untested spectra. Every
method returns pool rows in rank order, and a shorter budget takes a prefix,
so one ranking serves every budget.

Methods (:data:`METHODS`):

``random``
    A random order (the baseline every method is compared with).
``ks-model``
    Kennard–Stone (Kennard & Stone, Technometrics 11:137, 1969) on the pool
    alone, Mahalanobis distance in the current PLS model's score space (a PCA
    space of the pool when there is no model yet).
``ks-spectrum``
    Kennard–Stone on the pool alone, Euclidean on the full preprocessed spectra.
``ks-augment``
    Kennard–Stone augmenting the existing set (its rows count as already
    chosen), Mahalanobis in a PCA space fitted on existing + pool rows.
``d-optimal-pls``
    Fedorov exchange maximising det(ZᵀZ), Z = [1, scores] on the current
    model's PLS scores, existing rows fixed (Ferré & Rius, Anal. Chem.
    68:1565, 1996); PCA scores of the pool without a model.
``d-optimal-pca``
    The same on the PCA space of existing + pool rows (the space
    ``ks-augment`` uses), so directions the current model has not seen count.
``outside-first``
    Only pool spectra that fail a prediction-time check of the current model
    (leverage, Hotelling T², Q residual or nearest-neighbour distance; see
    :class:`registry.chemometrics.ApplicabilityDomain`) are candidates; they
    are ranked by ``ks-augment``; the rest follow, also by ``ks-augment``.
``spxy``
    SPXY (Galvão et al., Talanta 67:736, 2005) augmenting the existing set,
    with the existing reference values and the current model's predictions
    for the pool.
``uncertainty``
    The pool rows whose prediction varies most over a bootstrap ensemble of
    the current model (Efron & Tibshirani, An Introduction to the Bootstrap,
    1993, ch. 6: bootstrap standard error), largest first.

``outside-first``, ``spxy`` and ``uncertainty`` need an existing calibration
with reference values (a model); the others work without one.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np
from threadpoolctl import threadpool_limits

from registry.chemometrics.crossval import cross_validate_pls
from registry.chemometrics.diagnostics import ApplicabilityDomain
from registry.chemometrics.pls import PLSRegressor
from registry.errors import InputError
from registry.selection._checks import check_count, check_matrix
from registry.selection.d_optimal import d_optimal
from registry.selection.kennard_stone import kennard_stone
from registry.selection.space import SelectionSpace
from registry.selection.spxy import spxy

METHODS = ("random", "ks-model", "ks-spectrum", "ks-augment", "d-optimal-pls", "d-optimal-pca",
           "outside-first", "spxy", "uncertainty")
#: Methods that need reference values of an existing calibration set.
NEEDS_MODEL = ("outside-first", "spxy", "uncertainty")
#: The prediction-time checks that say "outside the calibration space" (the y-range
#: check is about the value, not the spectrum).
SPACE_FLAGS = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour")
#: Prediction-time check level; 99 % keeps chance flags of routine spectra rare
#: with four checks per spectrum (common practice).
DIAGNOSTICS_CONFIDENCE = 0.99
#: Bootstrap models for the ``uncertainty`` method.
N_BOOTSTRAP_MODELS = 25


class SelectionProblem:
    """An existing calibration set and a candidate pool, ready to be ranked.

    Parameters
    ----------
    X_pool : array-like of shape (m, p)
        Preprocessed spectra of the untested candidates.
    X_existing : array-like of shape (n, p), optional
        Preprocessed spectra of the existing calibration set (None or 0 rows:
        a first calibration).
    y_existing : array-like of shape (n,), optional
        Their reference values.
    n_components : int, optional
        PLS components of the current model; chosen by 10-fold
        cross-validation (Haaland & Thomas 1988 rule) when not given.
    explained_variance : float
        Share of variance kept by the PCA selection space
        (:class:`registry.selection.SelectionSpace`).
    random_state : None, int or Generator
        Seed of ``random``, the D-optimal random starts and the bootstrap.
    """

    def __init__(self, X_pool, X_existing=None, y_existing=None, *,
                 n_components: int | None = None, explained_variance: float = 0.99,
                 random_state=None) -> None:
        self.X_pool = check_matrix(X_pool, "X_pool").astype(np.float64, copy=False)
        p = self.X_pool.shape[1]
        if X_existing is None or np.asarray(X_existing).size == 0:
            self.X_existing = np.empty((0, p))
            self.y_existing = np.empty(0)
        else:
            self.X_existing = check_matrix(X_existing, "X_existing").astype(np.float64,
                                                                            copy=False)
            if self.X_existing.shape[1] != p:
                raise InputError(f"X_existing has {self.X_existing.shape[1]} columns, X_pool "
                                 f"{p}: both must be preprocessed alike", field="X_existing")
            if y_existing is None:
                raise InputError("y_existing is needed with X_existing", field="y_existing")
            self.y_existing = np.asarray(y_existing, dtype=np.float64).ravel()
            if self.y_existing.size != self.X_existing.shape[0]:
                raise InputError("y_existing needs one value per existing spectrum",
                                 field="y_existing")
        self.n_components = n_components
        self.explained_variance = explained_variance
        self.rng = np.random.default_rng(random_state)

    # ------------------------------------------------------------ the situation
    @property
    def n_existing(self) -> int:
        return int(self.X_existing.shape[0])

    @property
    def n_pool(self) -> int:
        return int(self.X_pool.shape[0])

    @property
    def has_model(self) -> bool:
        return self.n_existing >= 4

    @cached_property
    def model(self) -> PLSRegressor:
        """The current PLS model, fitted on the existing set."""
        if not self.has_model:
            raise InputError("this method needs an existing calibration set with reference "
                             "values (at least 4 samples)", field="X_existing")
        a = self.n_components
        with threadpool_limits(limits=1, user_api="blas"):
            if a is None:
                n = self.n_existing
                a_max = max(1, min(15, n - n // min(10, n) - 2))
                a = cross_validate_pls(self.X_existing, self.y_existing, a_max,
                                       folds=min(10, n)).selected_components
            a = min(int(a), self.n_existing - 2)
            return PLSRegressor(n_components=a).fit(self.X_existing, self.y_existing)

    @cached_property
    def outside(self) -> np.ndarray:
        """Boolean per pool row: fails a prediction-time check of the current model."""
        domain = ApplicabilityDomain(confidence=DIAGNOSTICS_CONFIDENCE).fit(
            self.X_existing, self.model, self.y_existing)
        result = domain.assess(self.X_pool, self.model.predict(self.X_pool))
        return np.any(np.stack([result.flags[f] for f in SPACE_FLAGS]), axis=0)

    @property
    def outside_share(self) -> float:
        """Share of the pool outside the current model's space (0 without a model)."""
        return float(self.outside.mean()) if self.has_model else 0.0

    @cached_property
    def _pca(self):
        X_all = np.vstack([self.X_existing, self.X_pool])
        space = SelectionSpace(explained_variance=self.explained_variance).fit(X_all)
        T = space.transform(X_all)
        return T, space.eigenvalues_

    # ------------------------------------------------------------ the methods
    def rank(self, method: str, k: int) -> np.ndarray:
        """The first ``k`` pool rows (0-based) in ``method``'s rank order."""
        if method not in METHODS:
            raise InputError(f"unknown selection method {method!r}; use one of "
                             f"{', '.join(METHODS)}", field="method")
        k = check_count(k, "k")
        if k > self.n_pool:
            raise InputError(f"k={k} but the pool has only {self.n_pool} candidates", field="k")
        if method in NEEDS_MODEL and not self.has_model:
            raise InputError(f"{method} needs reference values of an existing calibration set",
                             field="method")
        with threadpool_limits(limits=1, user_api="blas"):
            picks = getattr(self, "_" + method.replace("-", "_"))(k)
        return np.asarray(picks, dtype=np.int64)[:k]

    def _random(self, k):
        return self.rng.permutation(self.n_pool)[:k]

    def _ks_model(self, k):
        if self.has_model:
            T = self.model.transform(self.X_pool)
        else:
            T = self._pca[0][self.n_existing:]
        return kennard_stone(T, k, metric="mahalanobis", start="farthest-pair",
                             on_duplicates="allow")

    def _ks_spectrum(self, k):
        return kennard_stone(self.X_pool, k, on_duplicates="allow")

    def _ks_augment(self, k, candidates=None, extra_fixed=None):
        """KS augment in the PCA space; ``candidates`` limits the pool rows used."""
        T, eig = self._pca
        n0 = self.n_existing
        rows = np.arange(self.n_pool) if candidates is None else np.asarray(candidates)
        fixed = np.arange(n0)
        if extra_fixed is not None and len(extra_fixed):
            fixed = np.concatenate([fixed, n0 + np.asarray(extra_fixed)])
        T_sub = np.vstack([T[fixed], T[n0 + rows]])
        picks = kennard_stone(T_sub, k, already_selected=np.arange(fixed.size) if fixed.size
                              else None, metric="mahalanobis", eigenvalues=eig,
                              on_duplicates="allow")
        return rows[picks - fixed.size]

    def _d_optimal_on(self, T, k):
        n0 = self.n_existing
        # the design is ranked by gain, so a prefix is a sensible smaller design; a
        # design needs at least as many rows as Z = [1, T] has columns
        need = max(k, T.shape[1] + 1 - n0)
        res = d_optimal(T, min(need, self.n_pool), already_selected=np.arange(n0) if n0 else None,
                        n_starts=2, random_state=self.rng)
        return np.asarray(res.indices) - n0

    def _d_optimal_pls(self, k):
        if not self.has_model:
            return self._d_optimal_pca(k)
        return self._d_optimal_on(self.model.transform(np.vstack([self.X_existing,
                                                                  self.X_pool])), k)

    def _d_optimal_pca(self, k):
        return self._d_optimal_on(self._pca[0], k)

    def _outside_first(self, k):
        out = np.flatnonzero(self.outside)
        first = self._ks_augment(min(k, out.size), candidates=out) if out.size else out
        if first.size >= k:
            return first
        rest = np.flatnonzero(~self.outside)
        then = self._ks_augment(k - first.size, candidates=rest, extra_fixed=first)
        return np.concatenate([first, then])

    def _spxy(self, k):
        n0 = self.n_existing
        X = np.vstack([self.X_existing, self.X_pool])
        y = np.concatenate([self.y_existing, self.model.predict(self.X_pool)])
        return spxy(X, y, k, already_selected=np.arange(n0)) - n0

    @cached_property
    def prediction_spread(self) -> np.ndarray:
        """Bootstrap standard deviation of each pool row's prediction."""
        n, a = self.n_existing, self.model.n_components
        preds = np.empty((N_BOOTSTRAP_MODELS, self.n_pool))
        for b in range(N_BOOTSTRAP_MODELS):
            rows = self.rng.integers(0, n, n)
            a_b = min(a, np.unique(rows).size - 2)
            preds[b] = PLSRegressor(n_components=max(1, a_b)).fit(
                self.X_existing[rows], self.y_existing[rows]).predict(self.X_pool)
        return preds.std(axis=0, ddof=1)

    def _uncertainty(self, k):
        # stable sort: equal spreads keep pool order
        return np.argsort(-self.prediction_spread, kind="stable")[:k]
