"""D-optimal selection by Fedorov exchange.

Fedorov, V. V. (1972), *Theory of Optimal Experiments*, Academic Press —
the exchange algorithm; the swap gain follows from the matrix determinant
lemma. Use in NIR/IR calibration design: Ferré, J. & Rius, F. X. (1996),
Anal. Chem. 68:1565–1571.

With ``M = ZᵀZ`` over the design rows and ``d(x, y) = xᵀM⁻¹y``, swapping
design row ``xᵢ`` out for candidate ``xⱼ`` multiplies ``det M`` by
``1 + Δ``, ``Δ = d(xⱼ) − d(xᵢ) − [d(xᵢ)d(xⱼ) − d(xᵢ, xⱼ)²]``. Each
iteration evaluates Δ for every (design row, candidate) pair with two
matrix products and makes the best swap; ``M⁻¹`` follows by two
Sherman–Morrison updates and is recomputed from scratch every
``refresh_every`` swaps so rounding cannot build up.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from registry.errors import InputError
from registry.selection._checks import check_count, check_indices, check_matrix
from registry.selection.kennard_stone import kennard_stone

# Swaps that raise det M by a factor below 1 + this are not worth making.
_MIN_GAIN = 1e-10
# Largest (design rows × candidates) block of Δ values held at once.
_BLOCK_ELEMENTS = 2_000_000
# Random subsets drawn per random start before giving up on a singular one.
_RANDOM_START_TRIES = 20


@dataclass(frozen=True)
class DOptimalResult:
    """Outcome of :func:`d_optimal`.

    Attributes
    ----------
    indices : ndarray of int64
        The selected new rows, ranked: each is the remaining pick that most
        increases det(ZᵀZ) given the fixed rows and the picks ranked before
        it (a ridge term ``δI`` stands in while the matrix is still
        singular). A prefix is therefore a sensible smaller design, e.g.
        when cutting to a budget. ``np.asarray(result)`` gives this array.
    log_det : float
        ``ln det(ZᵀZ)`` over fixed + selected rows, recomputed from scratch
        with ``numpy.linalg.slogdet``.
    tracked_log_det : float
        The same value as followed through the exchanges (a cross-check).
    n_exchanges : int
        Swaps made in the winning start.
    start : str
        Which start won: "sequential", "kennard-stone" or "random-<k>".
    log_det_by_start : dict
        Final ``ln det`` of every start that ran.
    """

    indices: np.ndarray
    log_det: float
    tracked_log_det: float
    n_exchanges: int
    start: str
    log_det_by_start: dict = field(default_factory=dict)

    def __array__(self, dtype=None, copy=None):
        return np.asarray(self.indices, dtype=dtype)

    def __len__(self) -> int:
        return int(self.indices.size)


def design_matrix(T, intercept: bool = True) -> np.ndarray:
    """``Z = [1, T]`` (or ``T``) as float64."""
    T = np.asarray(T, dtype=np.float64)
    if not intercept:
        return np.array(T, dtype=np.float64)
    return np.hstack([np.ones((T.shape[0], 1)), T])


def d_optimal(T, n_select, *, already_selected=None, intercept: bool = True,
              n_starts: int = 5, random_state=None, max_iter: int = 1000,
              refresh_every: int = 25) -> DOptimalResult:
    """Choose ``n_select`` rows maximising det(ZᵀZ) of fixed + selected rows.

    Parameters
    ----------
    T : array-like of shape (n, a)
        Candidate scores (e.g. the first PCA scores; raw spectra make ZᵀZ
        singular).
    n_select : int
        New rows to choose.
    already_selected : sequence of int, optional
        Rows of ``T`` already in the calibration set: always in the design,
        never swapped out, never returned.
    intercept : bool
        Use ``Z = [1, T]`` (default) or ``Z = T``.
    n_starts : int
        Random starting designs, in addition to a greedy sequential start
        (rows added one at a time, each maximising the det(ZᵀZ + δI) gain)
        and a Kennard–Stone start (Euclidean on ``T``, ``start="approx-
        farthest"``, augmenting the fixed rows). The best final design wins
        (ties: the earlier start). Ties between swaps go to the earliest
        (candidate block, design slot, candidate) in scan order.
    random_state : None, int or numpy Generator
        Seed of the random starts; a given seed always gives the same result.
    max_iter : int
        Most swaps per start.
    refresh_every : int
        Recompute M⁻¹ and ln det from scratch after this many swaps.

    Returns
    -------
    DOptimalResult

    Raises
    ------
    InputError
        Bad shapes or values, or a design that must be singular: fewer
        design rows than columns of Z, or collinear columns of Z.
    """
    T = check_matrix(T, "T")
    n = T.shape[0]
    n_select = check_count(n_select, "n_select")
    n_starts = check_count(n_starts, "n_starts", minimum=0)
    max_iter = check_count(max_iter, "max_iter", minimum=0)
    refresh_every = check_count(refresh_every, "refresh_every")
    fixed = check_indices(already_selected, n, "already_selected")
    if n_select > n - fixed.size:
        raise InputError(f"n_select={n_select} but only {n - fixed.size} candidate rows are "
                         "not already selected", field="n_select")
    Z = design_matrix(T, intercept)
    p = Z.shape[1]
    rank = int(np.linalg.matrix_rank(Z))
    if rank < p:
        raise InputError(f"the columns of {'[1, T]' if intercept else 'T'} are collinear "
                         f"(rank {rank} < {p}): det(ZᵀZ) is 0 for every design; drop "
                         "redundant score columns", field="T")
    fixed_rank = int(np.linalg.matrix_rank(Z[fixed])) if fixed.size else 0
    if n_select < p - fixed_rank:
        raise InputError(f"a design needs at least {p} independent rows (Z has {p} columns); "
                         f"the already selected rows give {fixed_rank}, so choose at least "
                         f"{p - fixed_rank} (asked for {n_select})", field="n_select")

    rng = np.random.default_rng(random_state)
    starts = [("sequential", _sequential_start(Z, fixed, n_select))]
    ks = kennard_stone(T, n_select, already_selected=fixed if fixed.size else None,
                       start="approx-farthest", on_duplicates="allow")
    starts.append(("kennard-stone", ks))
    free = np.setdiff1d(np.arange(n), fixed)
    for k in range(n_starts):
        subset = _random_start(Z, fixed, free, n_select, rng)
        if subset is not None:
            starts.append((f"random-{k + 1}", subset))

    best = None
    by_start = {}
    for label, subset in starts:
        if not _is_regular(Z, fixed, subset):
            continue  # a singular start (e.g. duplicates); the others cover it
        subset, tracked, swaps = _exchange(Z, fixed, np.array(subset, dtype=np.int64),
                                           max_iter, refresh_every)
        by_start[label] = tracked
        if best is None or tracked > best[1] + 1e-12 * max(1.0, abs(best[1])):
            best = (label, tracked, swaps, subset)
    if best is None:
        raise InputError("no non-singular starting design was found: the candidates are "
                         "(near) collinear or duplicated", field="T")
    label, tracked, swaps, subset = best
    ranked = _rank_by_gain(Z, fixed, subset)
    _, log_det = _log_det(Z, fixed, ranked)
    return DOptimalResult(indices=ranked, log_det=float(log_det), tracked_log_det=float(tracked),
                          n_exchanges=int(swaps), start=label, log_det_by_start=by_start)


def _log_det(Z: np.ndarray, fixed: np.ndarray, subset) -> tuple[float, float]:
    rows = Z[np.concatenate([fixed, np.asarray(subset, dtype=np.int64)])]
    return np.linalg.slogdet(rows.T @ rows)


def _is_regular(Z: np.ndarray, fixed: np.ndarray, subset) -> bool:
    rows = Z[np.concatenate([fixed, np.asarray(subset, dtype=np.int64)])]
    return int(np.linalg.matrix_rank(rows)) == Z.shape[1]


def _ridge(Z: np.ndarray) -> float:
    """Tiny ridge δ for ranking while ZᵀZ is still singular (1e-8 of a row's ‖z‖²)."""
    return 1e-8 * float(np.einsum("ij,ij->", Z, Z)) / Z.shape[0]


def _greedy_add(Z: np.ndarray, fixed: np.ndarray, pool: np.ndarray, count: int) -> np.ndarray:
    """Add ``count`` rows of ``pool`` one at a time, each maximising zᵀ(M + δI)⁻¹z.

    Adding z multiplies det(M + δI) by 1 + zᵀ(M + δI)⁻¹z, so this is the
    sequential (one-at-a-time) D-optimal rule; ties go to the earlier pool entry.
    """
    p = Z.shape[1]
    Zf = Z[fixed]
    M_inv = np.linalg.inv(Zf.T @ Zf + _ridge(Z) * np.eye(p))
    Zp = Z[pool]
    gain = np.einsum("ij,ij->i", Zp @ M_inv, Zp)
    order = []
    for _ in range(count):
        k = int(np.argmax(gain))
        order.append(int(pool[k]))
        u = M_inv @ Zp[k]
        denom = 1.0 + Zp[k] @ u
        M_inv -= np.outer(u, u) / denom
        # d_new(x) = d(x) - (xᵀu)² / (1 + zᵀu)  (Sherman–Morrison)
        gain -= (Zp @ u) ** 2 / denom
        gain[k] = -np.inf
    return np.asarray(order, dtype=np.int64)


def _sequential_start(Z, fixed, n_select):
    free = np.setdiff1d(np.arange(Z.shape[0]), fixed)
    return _greedy_add(Z, fixed, free, n_select)


def _rank_by_gain(Z, fixed, subset):
    return _greedy_add(Z, fixed, np.sort(np.asarray(subset, dtype=np.int64)), len(subset))


def _random_start(Z, fixed, free, n_select, rng):
    for _ in range(_RANDOM_START_TRIES):
        subset = rng.choice(free, size=n_select, replace=False)
        if _is_regular(Z, fixed, subset):
            return subset
    return None


def _exchange(Z, fixed, subset, max_iter, refresh_every):
    """Fedorov exchange from ``subset``; returns (subset, tracked ln det, swaps)."""
    n, p = Z.shape
    in_design = np.zeros(n, dtype=bool)
    in_design[fixed] = True
    in_design[subset] = True
    rows = Z[np.concatenate([fixed, subset])]
    M = rows.T @ rows
    M_inv = np.linalg.inv(M)
    log_det = np.linalg.slogdet(M)[1]
    k = subset.size
    col_step = max(1, _BLOCK_ELEMENTS // max(k, 1))
    swaps = 0
    for _ in range(max_iter):
        ZM = Z @ M_inv
        d_all = np.einsum("ij,ij->i", ZM, Z)
        d_out = d_all[subset]
        ZS_M = ZM[subset]  # rows z_iᵀM⁻¹ of the swappable design rows
        best_gain, best_slot, best_j = -np.inf, -1, -1
        for a in range(0, n, col_step):
            b = min(n, a + col_step)
            cross = ZS_M @ Z[a:b].T
            d_in = d_all[a:b]
            gain = d_in[None, :] - d_out[:, None] - (d_out[:, None] * d_in[None, :] - cross**2)
            gain[:, in_design[a:b]] = -np.inf
            flat = int(np.argmax(gain))
            if gain.flat[flat] > best_gain:
                best_gain = float(gain.flat[flat])
                best_slot, best_j = divmod(flat, b - a)
                best_j += a
        if not best_gain > _MIN_GAIN:
            break
        i = int(subset[best_slot])
        # Add z_j, then remove z_i (adding first keeps M non-singular).
        z = Z[best_j]
        u = M_inv @ z
        M_inv -= np.outer(u, u) / (1.0 + z @ u)
        z = Z[i]
        u = M_inv @ z
        M_inv += np.outer(u, u) / (1.0 - z @ u)
        log_det += np.log1p(best_gain)
        subset[best_slot] = best_j
        in_design[i] = False
        in_design[best_j] = True
        swaps += 1
        if swaps % refresh_every == 0:
            rows = Z[np.concatenate([fixed, subset])]
            M = rows.T @ rows
            M_inv = np.linalg.inv(M)
            log_det = np.linalg.slogdet(M)[1]
    return subset, float(log_det), swaps
