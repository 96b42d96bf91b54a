"""Kennard–Stone selection (maximin coverage of the candidate space).

Kennard, R. W. & Stone, L. A. (1969), "Computer aided design of
experiments", Technometrics 11(1):137–148.

Each step adds the candidate whose distance to its nearest already selected
point is largest. Only the newly picked row's distances are computed per
step (one matrix–vector product), so a run costs O(n·k·d) time and O(n)
extra memory; see :mod:`registry.selection._distance`.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from registry.errors import InputError
from registry.selection._checks import check_count, check_indices, check_matrix, check_weights
from registry.selection._distance import (SquaredDistances, column_variance, first_max,
                                          first_min)

START_RULES = ("farthest-pair", "approx-farthest", "mean", "farthest-from-mean")
METRICS = ("euclidean", "mahalanobis")
DUPLICATE_RULES = ("raise", "stop", "allow")

# Above this many rows the exact farthest-pair start (O(n²d)) is refused.
MAX_EXACT_PAIR_ROWS = 200_000
# Rough single-core rate used only to tell the user what they asked for.
_ASSUMED_MULTIPLY_ADDS_PER_SECOND = 1e10


def column_weights(X: np.ndarray, *, metric: str, scale, eigenvalues) -> np.ndarray | None:
    """Per-column weights ``w`` of ``Σ w_k (x_k - y_k)²`` (None = plain Euclidean).

    ``metric="mahalanobis"``: ``w = 1/λ`` with ``λ`` the given eigenvalues or
    the variance (ddof=1) of each column. This is the Mahalanobis distance
    for uncorrelated columns such as PCA scores. ``scale="auto"``: ``w =
    1/σ²`` with σ the population standard deviation (ddof=0) of each
    column, as autoscaling does; constant columns keep weight 1 (they add
    nothing to any distance). An array ``scale``: ``w = 1/scale²``.
    """
    if metric not in METRICS:
        raise InputError(f"metric must be one of {METRICS}, got {metric!r}", field="metric")
    d = X.shape[1]
    if metric == "mahalanobis":
        if scale is not None:
            raise InputError("scale cannot be combined with metric='mahalanobis', which "
                             "already divides each column by its variance", field="scale")
        if eigenvalues is not None:
            return 1.0 / check_weights(eigenvalues, d, "eigenvalues")
        if X.shape[0] < 2:
            raise InputError("metric='mahalanobis' needs at least 2 rows to estimate the "
                             "column variances (or pass eigenvalues=)", field="X")
        var = column_variance(X, ddof=1)
        if np.any(var <= 0):
            col = int(np.argmax(var <= 0))
            raise InputError(f"column {col} has zero variance: the Mahalanobis distance is "
                             "undefined (drop that score column)", field="X")
        return 1.0 / var
    if eigenvalues is not None:
        raise InputError("eigenvalues= is only used with metric='mahalanobis'",
                         field="eigenvalues")
    if scale is None:
        return None
    if isinstance(scale, str):
        if scale != "auto":
            raise InputError(f"scale must be None, 'auto' or one value per column, got {scale!r}",
                             field="scale")
        var = column_variance(X, ddof=0)
        var[var == 0] = 1.0
        return 1.0 / var
    return 1.0 / check_weights(scale, d, "scale") ** 2


def kennard_stone(X, n_select, *, already_selected=None, start: str = "farthest-pair",
                  metric: str = "euclidean", scale=None, eigenvalues=None,
                  dtype=np.float64, on_duplicates: str = "raise",
                  progress: Callable[[int], None] | None = None,
                  return_distances: bool = False,
                  max_exact_pair_rows: int = MAX_EXACT_PAIR_ROWS):
    """Pick ``n_select`` rows of ``X`` by the Kennard–Stone maximin rule.

    Kennard & Stone, Technometrics 11:137–148 (1969).

    Parameters
    ----------
    X : array-like of shape (n, d)
        Candidates (preprocessed spectra or PCA scores). Rows listed in
        ``already_selected`` are the existing calibration set.
    n_select : int
        Number of new rows to pick (>= 1, <= rows not already selected).
    already_selected : sequence of int, optional
        Rows already in the calibration set. Each candidate's nearest
        distance then starts at its distance to these rows and no start rule
        is used (augment mode). They are never picked.
    start : {"farthest-pair", "approx-farthest", "mean", "farthest-from-mean"}
        How the first pick(s) are made when nothing is selected yet:

        - ``"farthest-pair"`` (default): the two most distant rows, exact,
          computed in row blocks (O(n²d) time, never an n×n matrix); refused
          above ``max_exact_pair_rows`` rows.
        - ``"approx-farthest"``: two passes, the row farthest from the mean,
          then the row farthest from that one; O(nd), usually within a few
          per cent of the true largest distance.
        - ``"mean"``: a single first pick, the row *nearest* the column mean,
          then maximin (published implementations differ here; this is the
          "start from the centre" variant).
        - ``"farthest-from-mean"``: a single first pick, the row *farthest*
          from the column mean, as the general-purpose ``kennard-stone``
          package does.

        The pair rules return the lower index of the pair first.
    metric : {"euclidean", "mahalanobis"}
        ``"mahalanobis"`` is meant for PCA scores:
        H² = Σₐ (tᵢₐ − tⱼₐ)² / λₐ with λ the ``eigenvalues`` or, if not given,
        the variance of each column. It is done by rescaling columns, so it
        equals the true Mahalanobis distance only for uncorrelated columns.
    scale : None, "auto" or array of shape (d,)
        Column scaling for the Euclidean metric: "auto" divides each column
        by its population standard deviation (autoscaling).
    eigenvalues : array of shape (d,), optional
        Score variances for ``metric="mahalanobis"``.
    dtype : {numpy.float64, numpy.float32}
        Working precision. float32 halves memory traffic; near-ties may then
        resolve differently from float64.
    on_duplicates : {"raise", "stop", "allow"}
        What happens when every remaining candidate is identical (distance
        0 within working precision) to a selected row, i.e. all distinct
        rows are used: "raise" an InputError saying how many distinct picks
        were possible; "stop" and return the shorter list; "allow" keep
        picking the duplicates in index order.
    progress : callable, optional
        Called as ``progress(picks_done)`` after every pick.
    return_distances : bool
        Also return, for each pick, its distance to the nearest row selected
        before it (NaN for a first pick with nothing selected yet).
    max_exact_pair_rows : int
        Size limit of the exact farthest-pair start.

    Returns
    -------
    indices : ndarray of int64, shape (n_select,)
        Row indices into ``X`` in pick order (shorter only with
        ``on_duplicates="stop"``).
    distances : ndarray of float64
        Only with ``return_distances=True``.

    Notes
    -----
    Ties: candidates whose squared distances differ by no more than the
    rounding tolerance of the working precision are tied; the lowest row
    index wins. The same rule picks the lowest ``(i, j)`` pair for
    ``"farthest-pair"`` and the lowest index for the mean-based starts.
    """
    X = check_matrix(X, "X")
    n = X.shape[0]
    n_select = check_count(n_select, "n_select")
    fixed = check_indices(already_selected, n, "already_selected")
    available = n - fixed.size
    if n_select > available:
        raise InputError(f"n_select={n_select} but only {available} candidate rows are not "
                         "already selected", field="n_select")
    if start not in START_RULES:
        raise InputError(f"start must be one of {START_RULES}, got {start!r}", field="start")
    if on_duplicates not in DUPLICATE_RULES:
        raise InputError(f"on_duplicates must be one of {DUPLICATE_RULES}, got "
                         f"{on_duplicates!r}", field="on_duplicates")
    dtype = np.dtype(dtype)
    if dtype not in (np.dtype(np.float64), np.dtype(np.float32)):
        raise InputError(f"dtype must be float64 or float32, got {dtype}", field="dtype")
    if fixed.size == 0 and start == "farthest-pair" and n > max_exact_pair_rows:
        madds = n * n * X.shape[1] / 2
        raise InputError(
            f"the exact farthest-pair start compares all {n:,} rows pairwise: about "
            f"{madds:.1e} multiply-adds (~{madds / _ASSUMED_MULTIPLY_ADDS_PER_SECOND / 60:.0f} "
            "min on one core). Use start='mean' or start='approx-farthest' (farthest from the "
            "mean, then farthest from that), which cost O(n·d)", field="start")

    weights = column_weights(X, metric=metric, scale=scale, eigenvalues=eigenvalues)
    engine = SquaredDistances(X, weights, dtype)
    picker = _Maximin(engine, on_duplicates, progress)

    if fixed.size:
        picker.seed_with(fixed)
    elif start == "farthest-pair":
        if n >= 2:
            i, j, d2 = engine.farthest_pair()
            picker.take_pair(i, j, d2, want_second=n_select >= 2)
        else:
            picker.take(0, np.nan)
    elif start == "approx-farthest":
        a = first_max(engine.norms, engine.tol)
        d2_a = engine.from_row(a)
        picker.take(a, np.nan, d2_a)
        # The second pick is simply the first maximin step from a.
    elif start == "mean":
        picker.take(first_min(engine.norms, engine.tol), np.nan)
    else:  # farthest-from-mean
        picker.take(first_max(engine.norms, engine.tol), np.nan)

    while len(picker.picks) < n_select:
        if not picker.step():
            break
    picks = np.asarray(picker.picks[:n_select], dtype=np.int64)
    if return_distances:
        return picks, np.sqrt(np.asarray(picker.pick_d2[:n_select], dtype=np.float64))
    return picks


class _Maximin:
    """The running min-distance vector and the pick loop (shared with Duplex)."""

    def __init__(self, engine: SquaredDistances, on_duplicates: str, progress) -> None:
        self.engine = engine
        self.on_duplicates = on_duplicates
        self.progress = progress
        # Nearest squared distance to the selected set; -inf marks rows taken.
        self.min_d2 = np.full(engine.n, np.inf)
        self.picks: list[int] = []
        self.pick_d2: list[float] = []

    def seed_with(self, rows: np.ndarray) -> None:
        for r in rows:
            self.engine.lower_min(int(r), self.min_d2)
        self.min_d2[rows] = -np.inf

    def take(self, i: int, d2: float, d2_from_i: np.ndarray | None = None) -> None:
        if d2_from_i is None:
            self.engine.lower_min(i, self.min_d2)
        else:
            np.minimum(self.min_d2, d2_from_i, out=self.min_d2)
        self.min_d2[i] = -np.inf
        self.picks.append(int(i))
        self.pick_d2.append(float(d2))
        if self.progress is not None:
            self.progress(len(self.picks))

    def take_pair(self, i: int, j: int, d2: float, want_second: bool = True) -> None:
        self.take(i, np.nan)
        if not want_second:
            return
        if d2 <= self.engine.tol:
            if not self._duplicates_ok(1):
                return
            d2 = 0.0
        self.take(j, d2)

    def step(self) -> bool:
        """Add the maximin candidate; False when stopped on duplicates."""
        top = int(np.argmax(self.min_d2))
        best = float(self.min_d2[top])
        if best == -np.inf:
            return False
        if best <= self.engine.tol and not self._duplicates_ok(len(self.picks)):
            return False
        # Lowest-index tie rule: only rows up to the first exact maximum can tie.
        i = int(np.argmax(self.min_d2[: top + 1] >= best - self.engine.tol))
        self.take(i, best if best > self.engine.tol else 0.0)
        return True

    def _duplicates_ok(self, n_distinct: int) -> bool:
        if self.on_duplicates == "allow":
            return True
        if self.on_duplicates == "stop":
            return False
        raise InputError(
            f"only {n_distinct} distinct row(s) could be picked: every remaining candidate is "
            "identical to a row already selected. Ask for fewer picks, remove duplicate "
            "spectra, or pass on_duplicates='stop' or 'allow'", field="n_select")
