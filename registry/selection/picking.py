"""The steps of a selection run that need only score arrays: rank the pool, find what
each pick is nearest to, and measure the coverage it buys.

Inputs are PCA scores of one :class:`~registry.selection.SelectionSpace`: the
calibration rows ``T_cal`` (possibly none) and the candidate pool ``T_pool``.
Distances are Mahalanobis on scores, H² = Σₐ Δtₐ²/λₐ, when ``eigenvalues`` are
given, else Euclidean (as in :func:`~registry.selection.kennard_stone`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.spatial import cKDTree

from registry.chemometrics.diagnostics import hotelling_t2_limit
from registry.errors import InputError
from registry.selection.budget import coverage_summary
from registry.selection.d_optimal import d_optimal
from registry.selection.duplex import duplex
from registry.selection.kennard_stone import kennard_stone
from registry.selection.spxy import spxy

#: ``kennard-stone``: maximin augment of the calibration rows (Kennard & Stone 1969).
#: ``d-optimal``: Fedorov exchange maximising det(ZᵀZ), Z = [1, scores], calibration rows
#: fixed (Ferré & Rius, Trends Anal. Chem. 15:424, 1996, from memory). ``duplex``: Snee
#: (1977) on the pool alone; the picks form a new calibration set and an independent
#: validation set (about half each); the calibration rows do not steer it. ``spxy``:
#: Kennard–Stone augment on the joint distance of scores and values (Galvão et al.,
#: Talanta 67:736, 2005): the calibration rows' reference values and the current model's
#: predictions for the pool; Euclidean on the scores, as the paper uses the spectra.
METHODS = ("kennard-stone", "d-optimal", "duplex", "spxy")
#: Methods that need values (reference values of the calibration rows, predictions of the pool).
NEEDS_VALUES = ("spxy",)
CALIBRATION, VALIDATION = "calibration", "validation"
#: Duplex needs two rows for each of its two sets.
DUPLEX_MIN_PICKS = 4


@dataclass(frozen=True)
class Picks:
    """Pool rows in rank order and what each is for.

    Attributes
    ----------
    rows : ndarray of int64
        Rows of ``T_pool``, best first.
    use : tuple of str
        ``"calibration"`` or ``"validation"`` per pick (validation only from Duplex).
    method : str
    random_state : int or None
        The seed of the D-optimal random starts (None for the other methods).
    """

    rows: np.ndarray
    use: tuple[str, ...]
    method: str
    random_state: int | None = None


def _weights(eigenvalues, n_columns: int) -> np.ndarray:
    return (1.0 / np.sqrt(np.asarray(eigenvalues, dtype=np.float64)) if eigenvalues is not None
            else np.ones(n_columns))


def rank_pool(T_cal, T_pool, k: int, method: str, *, eigenvalues=None,
              random_state: int | None = None,
              progress: Callable[[int], None] | None = None, y_cal=None, y_pool=None) -> Picks:
    """Choose ``k`` rows of ``T_pool`` with ``method`` (see :data:`METHODS`).

    Parameters
    ----------
    T_cal : array of shape (n_cal, a)
        Scores of the calibration rows (Kennard–Stone augments them, D-optimal keeps
        them fixed, Duplex ignores them).
    T_pool : array of shape (n, a)
        Scores of the candidates.
    k : int
        Number of picks (Duplex: at least :data:`DUPLEX_MIN_PICKS`; ``k // 2`` go to
        validation).
    eigenvalues : array of shape (a,), optional
        Mahalanobis distances on scores when given (Kennard–Stone, Duplex).
    random_state : int, optional
        Seed of the D-optimal random starts.
    progress : callable, optional
        ``progress(picks_done)`` during Kennard–Stone.
    y_cal, y_pool : arrays of shape (n_cal,) and (n,), optional
        ``spxy`` only: reference values of the calibration rows and predicted values
        of the candidates.
    """
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; use one of {', '.join(METHODS)}",
                         field="method")
    T_cal = np.asarray(T_cal, dtype=np.float64).reshape(-1, np.shape(T_pool)[1])
    T_pool = np.asarray(T_pool, dtype=np.float64)
    n_cal = T_cal.shape[0]
    fixed = np.arange(n_cal) if n_cal else None
    metric = "mahalanobis" if eigenvalues is not None else "euclidean"
    if method == "kennard-stone":
        rows = kennard_stone(np.vstack([T_cal, T_pool]), k, already_selected=fixed,
                             metric=metric, eigenvalues=eigenvalues, progress=progress) - n_cal
        return Picks(np.asarray(rows, dtype=np.int64), (CALIBRATION,) * k, method)
    if method == "spxy":
        if y_cal is None or y_pool is None:
            raise InputError("spxy needs the calibration rows' reference values and the pool's "
                             "predicted values", field="method")
        y = np.concatenate([np.ravel(y_cal), np.ravel(y_pool)])
        rows = spxy(np.vstack([T_cal, T_pool]), y, k, already_selected=fixed) - n_cal
        return Picks(np.asarray(rows, dtype=np.int64), (CALIBRATION,) * k, method)
    if method == "d-optimal":
        res = d_optimal(np.vstack([T_cal, T_pool]), k, already_selected=fixed,
                        random_state=random_state)
        return Picks(np.asarray(res.indices, dtype=np.int64) - n_cal, (CALIBRATION,) * k, method,
                     random_state)
    if k < DUPLEX_MIN_PICKS:
        raise InputError(f"duplex needs at least {DUPLEX_MIN_PICKS} picks (two for calibration, "
                         f"two for validation), got {k}", field="k")
    n_val = k // 2
    cal_idx, val_idx = duplex(T_pool, k - n_val, n_val, metric=metric, eigenvalues=eigenvalues)
    rows, use = duplex_order(cal_idx, val_idx)
    return Picks(np.asarray(rows, dtype=np.int64), tuple(use), method)


def duplex_order(cal_idx, val_idx) -> tuple[list[int], list[str]]:
    """Duplex's own pick order: two calibration, two validation, then alternating
    (Snee, Technometrics 19:415, 1977)."""
    order, use = [], []
    cal, val = [int(i) for i in cal_idx], [int(i) for i in val_idx]
    for group, name in ((cal[:2], CALIBRATION), (val[:2], VALIDATION)):
        order += group
        use += [name] * len(group)
    for k in range(2, max(len(cal), len(val))):
        for seq, name in ((cal, CALIBRATION), (val, VALIDATION)):
            if k < len(seq):
                order.append(seq[k])
                use.append(name)
    return order, use


@dataclass(frozen=True)
class Nearest:
    """For each pick, the nearest row already chosen before it.

    ``distance[r]`` is NaN when nothing was chosen before pick ``r``;
    ``calibration_row[r]`` is the row of ``T_cal`` it is nearest to, or -1;
    ``pick_rank[r]`` the 0-based rank of the earlier pick it is nearest to, or -1.
    """

    distance: np.ndarray
    calibration_row: np.ndarray
    pick_rank: np.ndarray


def nearest_before(T_cal, T_pool, picks: Picks, *, eigenvalues=None) -> Nearest:
    """Distance from every pick to the nearest calibration row or earlier pick.

    For Duplex picks only earlier picks of the same set count (its own maximin
    criterion); for the other methods the calibration rows and every earlier pick.
    """
    T_pool = np.asarray(T_pool, dtype=np.float64)
    w = _weights(eigenvalues, T_pool.shape[1])
    S_cal = np.asarray(T_cal, dtype=np.float64).reshape(-1, T_pool.shape[1]) * w
    S_picks = T_pool[picks.rows] * w
    k = picks.rows.size
    dist = np.full(k, np.nan)
    cal_row = np.full(k, -1, dtype=np.int64)
    rank = np.full(k, -1, dtype=np.int64)
    own_set_only = picks.method == "duplex"
    for r in range(k):
        earlier = [j for j in range(r) if not own_set_only or picks.use[j] == picks.use[r]]
        ref = S_picks[earlier] if own_set_only else np.vstack([S_cal, S_picks[:r]])
        if ref.shape[0] == 0:
            continue
        d = np.sqrt(((ref - S_picks[r]) ** 2).sum(axis=1))
        j = int(np.argmin(d))
        dist[r] = float(d[j])
        if own_set_only:
            rank[r] = earlier[j]
        elif j < S_cal.shape[0]:
            cal_row[r] = j
        else:
            rank[r] = j - S_cal.shape[0]
    return Nearest(dist, cal_row, rank)


def coverage_gain(T_cal, T_recent, T_picks, *, eigenvalues=None) -> dict:
    """How well the calibration rows cover recent production, now and with the picks.

    Returns
    -------
    dict
        ``n_recent``, ``distance`` ("mahalanobis" or "euclidean"),
        ``largest_gap_now``/``_after`` (largest distance from a recent row to its
        nearest calibration row; None without calibration rows) and
        ``inside_share_now``/``_after``, ``nn_limit_now``/``_after`` from
        :func:`~registry.selection.coverage_summary` (the nearest-neighbour check;
        None where fewer than two reference rows exist).
    """
    T_recent = np.asarray(T_recent, dtype=np.float64)
    a = T_recent.shape[1]
    T_cal = np.asarray(T_cal, dtype=np.float64).reshape(-1, a)
    T_picks = np.asarray(T_picks, dtype=np.float64).reshape(-1, a)
    w = _weights(eigenvalues, a)
    after = np.vstack([T_cal, T_picks])

    def largest_gap(ref: np.ndarray) -> float | None:
        if ref.shape[0] == 0 or T_recent.shape[0] == 0:
            return None
        return float(cKDTree(ref * w).query(T_recent * w)[0].max())

    out = {"n_recent": int(T_recent.shape[0]),
           "distance": "mahalanobis" if eigenvalues is not None else "euclidean",
           "largest_gap_now": largest_gap(T_cal), "largest_gap_after": largest_gap(after),
           "inside_share_now": None, "inside_share_after": None,
           "nn_limit_now": None, "nn_limit_after": None}
    if T_recent.shape[0] == 0:
        return out
    if T_cal.shape[0] >= 2:
        cov = coverage_summary(T_cal, T_recent, T_picks, eigenvalues=eigenvalues)
        out.update(inside_share_now=cov.inside_share_now, inside_share_after=cov.inside_share_after,
                   nn_limit_now=cov.max_nn_now, nn_limit_after=cov.max_nn_after)
    elif after.shape[0] >= 2:
        cov = coverage_summary(after, T_recent, np.empty((0, a)), eigenvalues=eigenvalues)
        out.update(inside_share_after=cov.inside_share_now, nn_limit_after=cov.max_nn_now)
    return out


def brought_inside(Z_recent, nn_only_outside, Z_picks, limit: float, *, eigenvalues=None
                   ) -> np.ndarray:
    """Which recent rows the picks would bring inside today's space, today's limits fixed.

    With the model's limits fixed (it is not refitted), a pick added to the
    calibration set changes one check only: the nearest-neighbour distance. So a
    recent row counts as brought inside when the nearest-neighbour check is the only
    check it fails now (``nn_only_outside``) and a pick lies within today's limit
    ``limit`` of it. Recomputing the limit with the picks in the set (the largest
    nearest-neighbour distance grows with every far pick) would instead report every
    recent row inside after a handful of picks. This is an estimate: a model refitted
    with the picks has a new space and new limits.

    Parameters
    ----------
    Z_recent : array-like (m, a)
        Scores of recent production (the space of the nearest-neighbour check).
    nn_only_outside : array-like of bool (m,)
        Rows whose only failing check now is the nearest-neighbour one.
    Z_picks : array-like (k, a)
        Scores of the picks, in the same space.
    limit : float
        Today's nearest-neighbour limit in that space.
    eigenvalues : array (a,), optional
        Mahalanobis weights on the scores when given, else Euclidean.

    Returns
    -------
    ndarray of bool (m,)
    """
    Z_recent = np.asarray(Z_recent, dtype=np.float64)
    reachable = np.asarray(nn_only_outside, dtype=bool).reshape(-1)
    a = Z_recent.shape[1] if Z_recent.ndim == 2 else 0
    Z_picks = np.asarray(Z_picks, dtype=np.float64).reshape(-1, a)
    if Z_recent.shape[0] == 0 or Z_picks.shape[0] == 0:
        return np.zeros(reachable.shape[0], dtype=bool)
    w = _weights(eigenvalues, a)
    dist = cKDTree(Z_picks * w).query(Z_recent * w)[0]
    return reachable & (dist <= float(limit))


def t2_ellipse(T_cal, confidence: float = 0.99, n_points: int = 121) -> np.ndarray | None:
    """The calibration rows' Hotelling T² limit drawn in the plane of two scores.

    The ellipse (t − μ)ᵀ S⁻¹ (t − μ) = T²_lim, with μ and S the mean and covariance of
    the calibration rows' two scores and T²_lim the limit of a new observation
    (:func:`registry.chemometrics.diagnostics.hotelling_t2_limit`, A = 2). A candidate
    outside it is further from the calibration in these two scores than the limit
    allows; inside, it may still differ in the scores not drawn.

    Parameters
    ----------
    T_cal : array of shape (n, 2)
    confidence : float
    n_points : int

    Returns
    -------
    ndarray of shape (n_points, 2), or None with fewer than 4 rows or a singular S.
    """
    T = np.asarray(T_cal, dtype=np.float64)
    if T.ndim != 2 or T.shape[1] != 2 or T.shape[0] < 4:
        return None
    S = np.cov(T, rowvar=False)
    try:
        L = np.linalg.cholesky(S)
    except np.linalg.LinAlgError:
        return None
    theta = np.linspace(0.0, 2 * np.pi, n_points)
    circle = np.column_stack([np.cos(theta), np.sin(theta)])
    radius = np.sqrt(hotelling_t2_limit(T.shape[0], 2, confidence))
    return T.mean(axis=0) + radius * circle @ L.T
