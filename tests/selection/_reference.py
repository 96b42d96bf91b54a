"""Brute-force reference implementations written straight from the papers.

They build full distance matrices, so they are only for small test sets.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial.distance import cdist


def squared_distances(X: np.ndarray) -> np.ndarray:
    """Full matrix of squared Euclidean distances (scipy, by differences)."""
    return cdist(X, X, metric="sqeuclidean")


def kennard_stone_1969(X, k, start="farthest-pair", already_selected=()):
    """Kennard & Stone, Technometrics 11:137 (1969), taken literally.

    Begin with the two most distant points (or, for the centre variant, the
    point nearest the mean); then repeatedly add the candidate whose
    smallest distance to the points already chosen is largest. Ties go to
    the first index (numpy argmax/argmin return the first occurrence).
    """
    X = np.asarray(X, dtype=np.float64)
    return max_min_picks(squared_distances(X), k, start=start, X=X,
                         already_selected=already_selected)


def max_min_picks(D, k, start="farthest-pair", X=None, already_selected=()):
    """The Kennard–Stone loop on a full distance matrix ``D`` (any distance: SPXY's joint
    x–y distance too); ``X`` is needed only by the centre starts."""
    chosen = list(already_selected)
    picks = []
    if not chosen:
        if start == "farthest-pair":
            upper = np.where(np.triu(np.ones_like(D, dtype=bool), 1), D, -1.0)
            i, j = np.unravel_index(np.argmax(upper), D.shape)
            picks = [int(i), int(j)]
        elif start == "mean":
            picks = [int(np.argmin(((X - X.mean(axis=0)) ** 2).sum(axis=1)))]
        elif start == "farthest-from-mean":
            picks = [int(np.argmax(((X - X.mean(axis=0)) ** 2).sum(axis=1)))]
        chosen += picks
    while len(picks) < k:
        nearest = D[:, chosen].min(axis=1)
        nearest[chosen] = -1.0
        best = int(np.argmax(nearest))
        picks.append(best)
        chosen.append(best)
    return picks[:k]


def duplex_1977(X, n_cal, n_val):
    """Snee, Technometrics 19:415 (1977): Duplex, taken literally.

    The two farthest points go to calibration, the two farthest of the rest
    to validation; then calibration and validation alternately take the
    remaining point farthest from their own nearest member; a full set
    stops taking points.
    """
    X = np.asarray(X, dtype=np.float64)
    D = squared_distances(X)
    n = len(X)
    free = list(range(n))

    def farthest_pair():
        best, pair = -1.0, None
        for a in free:
            for b in free:
                if a < b and D[a, b] > best:
                    best, pair = D[a, b], (a, b)
        return pair

    cal = list(farthest_pair())
    free = [r for r in free if r not in cal]
    val = list(farthest_pair())
    free = [r for r in free if r not in val]
    while len(cal) < n_cal or len(val) < n_val:
        for own, size in ((cal, n_cal), (val, n_val)):
            if len(own) < size:
                score = [D[r, own].min() for r in free]
                pick = free[int(np.argmax(score))]
                own.append(pick)
                free.remove(pick)
    return cal, val
