"""Duplex split of rated samples into calibration and validation sets.

Snee, R. D. (1977), "Validation of regression models: methods and
examples", Technometrics 19(4):415–428.
"""

from __future__ import annotations

import numpy as np

from registry.errors import InputError
from registry.selection._checks import check_count, check_matrix
from registry.selection._distance import SquaredDistances
from registry.selection.kennard_stone import MAX_EXACT_PAIR_ROWS, _Maximin, column_weights


def duplex(X, n_cal, n_val, *, metric: str = "euclidean", scale=None, eigenvalues=None,
           dtype=np.float64, max_exact_pair_rows: int = MAX_EXACT_PAIR_ROWS):
    """Split rows of ``X`` into calibration and validation sets (Duplex).

    Snee, Technometrics 19:415–428 (1977): the two rows farthest apart go
    to calibration, the two farthest apart among the rest to validation;
    then the sets take turns (calibration first), each adding the remaining
    row farthest from its *own* nearest member (maximin).

    Parameters
    ----------
    X : array-like of shape (n, d)
        Samples (preprocessed spectra or scores).
    n_cal, n_val : int
        Set sizes, each >= 2, with ``n_cal + n_val <= n``.
    metric, scale, eigenvalues, dtype
        As for :func:`registry.selection.kennard_stone`.
    max_exact_pair_rows : int
        The two farthest-pair searches are O(n²d); refused above this size.

    Returns
    -------
    cal_idx, val_idx : ndarray of int64
        Row indices in pick order (each initial pair lower index first).

    Notes
    -----
    When one set is full the other keeps adding its own maximin row until
    it is full too; rows left over belong to neither set. Ties go to the
    lowest row index (the lowest ``(i, j)`` for the pairs). Rows identical
    to an earlier row are still assigned (distance 0 picks come last, in
    index order).
    """
    X = check_matrix(X, "X")
    n = X.shape[0]
    n_cal = check_count(n_cal, "n_cal", minimum=2)
    n_val = check_count(n_val, "n_val", minimum=2)
    if n_cal + n_val > n:
        raise InputError(f"n_cal + n_val = {n_cal + n_val} exceeds the {n} rows available",
                         field="n_val")
    if n > max_exact_pair_rows:
        raise InputError(f"Duplex needs the exact farthest pair of {n:,} rows (O(n²·d)); "
                         f"this is refused above {max_exact_pair_rows:,} rows", field="X")
    weights = column_weights(X, metric=metric, scale=scale, eigenvalues=eigenvalues)
    engine = SquaredDistances(X, weights, np.dtype(dtype))

    cal = _Maximin(engine, "allow", None)
    val = _Maximin(engine, "allow", None)
    free = np.ones(n, dtype=bool)

    i, j, d2 = engine.farthest_pair()
    _assign(cal, val, free, i, np.nan)
    _assign(cal, val, free, j, d2)
    i, j, d2 = engine.farthest_pair(free)
    _assign(val, cal, free, i, np.nan)
    _assign(val, cal, free, j, d2)

    while len(cal.picks) < n_cal or len(val.picks) < n_val:
        for own, other, size in ((cal, val, n_cal), (val, cal, n_val)):
            if len(own.picks) < size:
                best = float(own.min_d2.max())
                k = int(np.argmax(own.min_d2 >= best - engine.tol))
                _assign(own, other, free, k, best)
    return (np.asarray(cal.picks[:n_cal], dtype=np.int64),
            np.asarray(val.picks[:n_val], dtype=np.int64))


def _assign(own: _Maximin, other: _Maximin, free: np.ndarray, row: int, d2: float) -> None:
    """Put ``row`` in ``own``; it is no longer a candidate for ``other``."""
    own.take(row, d2)
    other.min_d2[row] = -np.inf
    free[row] = False
