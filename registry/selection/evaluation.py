"""Comparing selection strategies by the prediction error they lead to.

For each calibration size k, each strategy picks k rows of a pool, a model
is fitted on them and scored on an independent test set by RMSEP. The
model is supplied by the caller as ``fit_predict(X_cal, y_cal, X_test) ->
y_pred`` so the same harness serves PLS or any other regressor.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from registry.errors import InputError
from registry.selection._checks import check_count, check_matrix
from registry.selection.d_optimal import d_optimal
from registry.selection.kennard_stone import kennard_stone
from registry.selection.space import SelectionSpace

STRATEGIES = ("kennard-stone", "d-optimal", "random")


def rmsep(y_true, y_pred) -> float:
    """Root mean squared error of prediction, √(Σ(ŷ − y)²/n) (ASTM E1655 usage)."""
    e = np.asarray(y_pred, dtype=np.float64).ravel() - np.asarray(y_true, dtype=np.float64).ravel()
    return float(np.sqrt(np.mean(e**2)))


def compare_selection_strategies(X_pool, y_pool, X_test, y_test, ks, n_draws,
                                 fit_predict: Callable, *, strategies=STRATEGIES,
                                 n_components: int | None = None,
                                 explained_variance: float = 0.99,
                                 random_state=None) -> dict[str, dict[int, float]]:
    """Mean RMSEP per strategy and calibration size.

    Parameters
    ----------
    X_pool, y_pool : arrays of shape (n, d) and (n,)
        Candidates with their reference values.
    X_test, y_test : arrays
        Independent test set.
    ks : sequence of int
        Calibration sizes to try.
    n_draws : int
        Random subsets per k for "random" (averaged). Kennard–Stone is
        deterministic and is run once; D-optimal is run ``n_draws`` times
        with different seeds for its random starts and averaged.
    fit_predict : callable
        ``fit_predict(X_cal, y_cal, X_test) -> predictions``.
    strategies : sequence of str
        Any of "kennard-stone", "d-optimal", "random".
    n_components, explained_variance
        Size of the PCA selection space fitted on ``X_pool``
        (:class:`SelectionSpace`); Kennard–Stone uses Mahalanobis distance
        on those scores (farthest-pair start), D-optimal uses Z = [1, T].
    random_state : None, int or Generator
        Seed for the random subsets and the D-optimal random starts.

    Returns
    -------
    dict
        ``{strategy: {k: mean RMSEP}}``.
    """
    X_pool = check_matrix(X_pool, "X_pool", min_rows=2)
    X_test = check_matrix(X_test, "X_test")
    y_pool = np.asarray(y_pool, dtype=np.float64).ravel()
    y_test = np.asarray(y_test, dtype=np.float64).ravel()
    if y_pool.size != X_pool.shape[0] or y_test.size != X_test.shape[0]:
        raise InputError("y_pool / y_test need one value per row of X_pool / X_test",
                         field="y_pool")
    n_draws = check_count(n_draws, "n_draws")
    ks = [check_count(k, "ks") for k in ks]
    for s in strategies:
        if s not in STRATEGIES:
            raise InputError(f"unknown strategy {s!r}; use {STRATEGIES}", field="strategies")
    rng = np.random.default_rng(random_state)
    space = SelectionSpace(explained_variance=explained_variance,
                           n_components=n_components).fit(X_pool)
    T = space.transform(X_pool)

    def score(rows) -> float:
        rows = np.asarray(rows)
        return rmsep(y_test, fit_predict(X_pool[rows], y_pool[rows], X_test))

    result: dict[str, dict[int, float]] = {s: {} for s in strategies}
    if "kennard-stone" in strategies:
        # KS picks are nested: the first k of the longest run are the k-pick design.
        order = kennard_stone(T, max(ks), metric="mahalanobis", eigenvalues=space.eigenvalues_,
                              on_duplicates="allow")
        for k in ks:
            result["kennard-stone"][k] = score(order[:k])
    for k in ks:
        if "d-optimal" in strategies:
            result["d-optimal"][k] = float(np.mean([
                score(d_optimal(T, k, random_state=rng).indices) for _ in range(n_draws)]))
        if "random" in strategies:
            result["random"][k] = float(np.mean([
                score(rng.choice(X_pool.shape[0], size=k, replace=False))
                for _ in range(n_draws)]))
    return result
