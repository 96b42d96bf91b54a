"""Fitting ranked picks to a reference-testing budget, and why each pick helps.

The ranked picks of Kennard–Stone (pick order) or D-optimal (gain order)
are cut to what the lab can afford; the rationale numbers tell the user
what each pick adds: how far it is from everything already calibrated,
its leverage, the gain in ln det(ZᵀZ), and how much of recent production
the calibration space covers before and after.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from registry.errors import InputError
from registry.selection._checks import check_indices, check_matrix, check_weights
from registry.selection.d_optimal import design_matrix

# Relative slack on the budget so that e.g. 0.1 + 0.2 fits a budget of 0.3.
_BUDGET_RTOL = 1e-9


def _check_costs(ranked_costs, budget) -> tuple[np.ndarray, float]:
    costs = np.asarray(ranked_costs, dtype=np.float64).ravel()
    if not np.all(np.isfinite(costs)) or np.any(costs < 0):
        bad = int(np.argmax(~np.isfinite(costs) | (costs < 0)))
        raise InputError(f"cost of pick {bad + 1} is {costs[bad]}: costs must be finite and "
                         ">= 0", field="ranked_costs")
    budget = float(budget)
    if not np.isfinite(budget) or budget < 0:
        raise InputError(f"budget must be finite and >= 0, got {budget}", field="budget")
    return costs, budget * (1 + _BUDGET_RTOL)


def budget_positions(ranked_costs, budget, *, skip_expensive: bool = False) -> np.ndarray:
    """Positions (0-based, in rank order) of the picks bought within ``budget``.

    Default: picks are bought strictly in rank order and buying stops at the
    first pick that no longer fits; a cheaper pick ranked later is NOT
    bought ahead of it, because the rank order is the coverage order. With
    ``skip_expensive=True`` a pick that does not fit is skipped and later,
    cheaper picks are still bought while money remains.
    """
    costs, limit = _check_costs(ranked_costs, budget)
    if not skip_expensive:
        return np.arange(int(np.searchsorted(np.cumsum(costs), limit, side="right")))
    taken, spent = [], 0.0
    for k, c in enumerate(costs):
        if spent + c <= limit:
            taken.append(k)
            spent += c
    return np.asarray(taken, dtype=np.int64)


def fit_to_budget(ranked_costs, budget, *, skip_expensive: bool = False) -> int:
    """Number of ranked picks bought within ``budget``.

    Picks are taken in rank order while the cumulative cost stays <= the
    budget; without ``skip_expensive`` the result is a prefix length (see
    :func:`budget_positions` for which picks are bought when skipping).
    """
    return int(budget_positions(ranked_costs, budget, skip_expensive=skip_expensive).size)


@dataclass(frozen=True)
class PickRationale:
    """Per-pick numbers, each array aligned with the picks in rank order.

    Attributes
    ----------
    nn_distance : ndarray
        Distance from the pick to the nearest calibration sample or earlier
        pick, before it is added.
    leverage : ndarray
        ``zᵀ(ZᵀZ)⁻¹z`` of the pick against calibration + earlier picks
        (NaN while ZᵀZ is singular).
    log_det_gain : ndarray
        Increase of ln det(ZᵀZ) when the pick is added, ``ln(1 + leverage)``
        (matrix determinant lemma; NaN while ZᵀZ is singular).
    """

    nn_distance: np.ndarray
    leverage: np.ndarray
    log_det_gain: np.ndarray

    def rows(self) -> list[dict]:
        """One dict per pick, for tables and JSON."""
        return [{"rank": k + 1, "nn_distance": float(d), "leverage": float(h),
                 "log_det_gain": float(g)}
                for k, (d, h, g) in enumerate(zip(self.nn_distance, self.leverage,
                                                  self.log_det_gain))]


def _distance_weights(eigenvalues, n_columns: int):
    if eigenvalues is None:
        return None
    return 1.0 / np.sqrt(check_weights(eigenvalues, n_columns, "eigenvalues"))


def pick_rationale(T_cal, T_candidates, picks, *, intercept: bool = True,
                   eigenvalues=None) -> PickRationale:
    """Rationale numbers for ``picks`` (rows of ``T_candidates``) in rank order.

    Parameters
    ----------
    T_cal : array-like of shape (n_cal, a)
        Scores of the current calibration set (may have 0 rows).
    T_candidates : array-like of shape (n, a)
        Scores of the candidates, in the same space.
    picks : sequence of int
        Candidate rows in rank order.
    intercept : bool
        Z = [1, T] for leverage and ln det (as in :func:`d_optimal`).
    eigenvalues : array of shape (a,), optional
        If given, distances are Mahalanobis on scores (each column / √λ).
    """
    T_cand = check_matrix(T_candidates, "T_candidates")
    T_cal = np.asarray(T_cal, dtype=np.float64)
    if T_cal.size == 0:
        T_cal = np.empty((0, T_cand.shape[1]))
    T_cal = check_matrix(T_cal, "T_cal", min_rows=0)
    if T_cal.shape[1] != T_cand.shape[1]:
        raise InputError("T_cal and T_candidates must have the same score columns",
                         field="T_cal")
    picks = check_indices(picks, T_cand.shape[0], "picks")
    w = _distance_weights(eigenvalues, T_cand.shape[1])
    scaled = lambda T: T * w if w is not None else T  # noqa: E731
    Zc, Zp = design_matrix(T_cal, intercept), design_matrix(T_cand[picks], intercept)
    Sc, Sp = scaled(np.asarray(T_cal, dtype=np.float64)), scaled(T_cand[picks].astype(np.float64))
    M = Zc.T @ Zc
    k = picks.size
    nn = np.full(k, np.nan)
    lev = np.full(k, np.nan)
    for r in range(k):
        before = np.vstack([Sc, Sp[:r]])
        if before.shape[0]:
            nn[r] = float(np.sqrt(((before - Sp[r]) ** 2).sum(axis=1).min()))
        if np.linalg.matrix_rank(M) == M.shape[0]:
            lev[r] = float(Zp[r] @ np.linalg.solve(M, Zp[r]))
        M = M + np.outer(Zp[r], Zp[r])
    return PickRationale(nn_distance=nn, leverage=lev, log_det_gain=np.log1p(lev))


@dataclass(frozen=True)
class CoverageSummary:
    """How much of recent production the calibration space covers.

    A recent spectrum is *inside* when its nearest-neighbour distance to
    the calibration set is <= the largest nearest-neighbour distance within
    the calibration set (the nearest-neighbour check of prediction-time
    diagnostics). ``*_after`` use calibration + picks for both sides of the
    rule, so the share can in principle fall when picks fill the largest
    gap and tighten the limit.
    """

    n_recent: int
    inside_share_now: float
    inside_share_after: float
    max_nn_now: float
    max_nn_after: float


def _largest_internal_nn(S: np.ndarray) -> float:
    dist, _ = cKDTree(S).query(S, k=2)
    return float(dist[:, 1].max())


def coverage_summary(T_cal, T_recent, T_picks, *, eigenvalues=None) -> CoverageSummary:
    """Share of recent production inside the calibration space, now and with picks.

    Parameters
    ----------
    T_cal : array-like of shape (n_cal, a)
        Calibration scores (at least 2 rows).
    T_recent : array-like of shape (n_recent, a)
        Scores of recent production spectra.
    T_picks : array-like of shape (k, a)
        Scores of the proposed picks (may have 0 rows).
    eigenvalues : array of shape (a,), optional
        Mahalanobis distances on scores when given, else Euclidean.
    """
    T_cal = check_matrix(T_cal, "T_cal", min_rows=2)
    a = T_cal.shape[1]
    T_recent = check_matrix(T_recent, "T_recent")
    T_picks = np.asarray(T_picks, dtype=np.float64)
    if T_picks.size == 0:
        T_picks = np.empty((0, a))
    T_picks = check_matrix(T_picks, "T_picks", min_rows=0)
    for name, M in (("T_recent", T_recent), ("T_picks", T_picks)):
        if M.shape[1] != a:
            raise InputError(f"{name} has {M.shape[1]} score columns, T_cal has {a}", field=name)
    w = _distance_weights(eigenvalues, a)
    scale = (lambda T: T.astype(np.float64) * w) if w is not None else (
        lambda T: T.astype(np.float64))
    cal, recent, picks = scale(T_cal), scale(T_recent), scale(T_picks)

    def share_and_limit(S):
        limit = _largest_internal_nn(S)
        dist, _ = cKDTree(S).query(recent, k=1)
        return float(np.mean(dist <= limit)), limit

    share_now, nn_now = share_and_limit(cal)
    share_after, nn_after = share_and_limit(np.vstack([cal, picks]))
    return CoverageSummary(n_recent=int(recent.shape[0]), inside_share_now=share_now,
                           inside_share_after=share_after, max_nn_now=nn_now,
                           max_nn_after=nn_after)
