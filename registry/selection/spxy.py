"""SPXY: Kennard–Stone on a joint distance of spectra and reference values.

Galvão, R. K. H., Araujo, M. C. U., José, G. E., Pontes, M. J. C., Silva,
E. C. & Saldanha, T. C. B. (2005), "A method for calibration and validation
subset partitioning", Talanta 67:736–740.

Between rows p and q the distance is

    d_xy(p, q) = d_x(p, q) / max d_x + d_y(p, q) / max d_y

with d_x the Euclidean distance of the spectra (or scores), d_y that of the
reference values and both maxima taken over all pairs of rows, so spectra
and values weigh equally. The rows are then chosen by the Kennard–Stone
maximin rule on d_xy: the two most distant rows first, then repeatedly the
row whose nearest chosen row is farthest.

In a lab the candidates' reference values are not yet known; once a model
exists its predictions stand in for them (the caller passes ``y`` with the
known values for the existing calibration rows and predictions for the
candidates).
"""

from __future__ import annotations

import numpy as np

from registry.errors import InputError
from registry.selection._checks import check_count, check_indices, check_matrix
from registry.selection._distance import SquaredDistances, first_max

#: Rows above which the exact farthest-pair start (one pass per row) is refused.
MAX_SPXY_PAIR_ROWS = 20_000
# Joint distances within this many units in the last place of the largest
# value count as tied (the lowest row index wins, as in kennard_stone).
_TIE_ULPS = 64


def _check_y(y, n: int) -> np.ndarray:
    arr = np.asarray(y, dtype=np.float64)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[0] != n:
        raise InputError(f"y must hold one value (or one row of values) per row of X ({n})",
                         field="y")
    if not np.all(np.isfinite(arr)):
        bad = int(np.argwhere(~np.isfinite(arr))[0, 0])
        raise InputError(f"y row {bad} is not finite", field="y")
    return arr


class _JointDistance:
    """d_xy from one row to every row, normalised by the two largest distances."""

    def __init__(self, X: np.ndarray, Y: np.ndarray) -> None:
        self.engine = SquaredDistances(X, None, np.float64)
        self.Y = Y
        _, _, max_dx2 = self.engine.farthest_pair()
        self.max_dx = float(np.sqrt(max_dx2))
        # the largest distance between value rows; for one property max - min
        self.max_dy = (float(Y[:, 0].max() - Y[:, 0].min()) if Y.shape[1] == 1
                       else float(np.sqrt(SquaredDistances(Y, None, np.float64)
                                          .farthest_pair()[2])))

    def from_row(self, i: int) -> np.ndarray:
        d = np.zeros(self.engine.n)
        if self.max_dx > 0:
            d += np.sqrt(self.engine.from_row(i)) / self.max_dx
        if self.max_dy > 0:
            d += np.sqrt(((self.Y - self.Y[i]) ** 2).sum(axis=1)) / self.max_dy
        return d

    def tol(self, largest: float) -> float:
        return _TIE_ULPS * float(np.finfo(np.float64).eps) * max(largest, 1.0)


def spxy(X, y, n_select, *, already_selected=None, return_distances: bool = False):
    """Pick ``n_select`` rows by SPXY (Galvão et al., Talanta 67:736, 2005).

    Parameters
    ----------
    X : array-like of shape (n, d)
        Preprocessed spectra or scores of all rows (existing calibration
        rows and candidates).
    y : array-like of shape (n,) or (n, m)
        Reference values; for candidates without a result, a prediction.
    n_select : int
        New rows to pick.
    already_selected : sequence of int, optional
        Rows already in the calibration set (augment mode: each candidate's
        nearest distance starts at its distance to these rows; no start pair).
    return_distances : bool
        Also return each pick's joint distance to its nearest earlier row
        (NaN for the first row of a fresh start).

    Returns
    -------
    indices : ndarray of int64, shape (n_select,)
        Row indices in pick order; a fresh start returns the lower index of
        the most distant pair first. Ties go to the lowest row index.
    distances : ndarray, only with ``return_distances``

    Notes
    -----
    The maxima of d_x and d_y are taken over every pair of rows given,
    existing rows included, as in the paper's definition over the data set.
    When all reference values are equal the d_y term is dropped and the
    picks are those of Kennard–Stone on ``X`` (Euclidean).
    """
    X = check_matrix(X, "X")
    n = X.shape[0]
    Y = _check_y(y, n)
    n_select = check_count(n_select, "n_select")
    fixed = check_indices(already_selected, n, "already_selected")
    if n_select > n - fixed.size:
        raise InputError(f"n_select={n_select} but only {n - fixed.size} rows are not already "
                         "selected", field="n_select")
    if fixed.size == 0 and n > MAX_SPXY_PAIR_ROWS:
        raise InputError(f"the SPXY start compares all {n:,} rows pairwise; above "
                         f"{MAX_SPXY_PAIR_ROWS:,} rows pass an existing calibration set as "
                         "already_selected", field="X")
    joint = _JointDistance(X, Y)
    nearest = np.full(n, np.inf)
    picks: list[int] = []
    gaps: list[float] = []

    def take(i: int, gap: float) -> None:
        np.minimum(nearest, joint.from_row(i), out=nearest)
        nearest[i] = -np.inf
        picks.append(int(i))
        gaps.append(gap)

    if fixed.size:
        for r in fixed:
            np.minimum(nearest, joint.from_row(int(r)), out=nearest)
        nearest[fixed] = -np.inf
    else:
        i, j, best = _farthest_joint_pair(joint, n)
        take(i, np.nan)
        if n_select >= 2:
            take(j, best)
    while len(picks) < n_select:
        top = float(nearest.max())
        i = first_max(nearest, joint.tol(top))
        take(i, float(nearest[i]))
    out = np.asarray(picks[:n_select], dtype=np.int64)
    if return_distances:
        return out, np.asarray(gaps[:n_select], dtype=np.float64)
    return out


def _farthest_joint_pair(joint: _JointDistance, n: int) -> tuple[int, int, float]:
    """Most distant pair (i < j) in d_xy; ties go to the lowest (i, j)."""
    if n < 2:
        return 0, 0, 0.0
    row_best = np.empty(n)
    row_arg = np.zeros(n, dtype=np.int64)
    for i in range(n):
        d = joint.from_row(i)
        d[: i + 1] = -np.inf
        row_arg[i] = int(np.argmax(d)) if i < n - 1 else i
        row_best[i] = d[row_arg[i]] if i < n - 1 else -np.inf
    best = float(row_best.max())
    i = first_max(row_best, joint.tol(best))
    d = joint.from_row(i)
    d[: i + 1] = -np.inf
    j = first_max(d, joint.tol(best))
    return int(i), int(j), float(d[j])
