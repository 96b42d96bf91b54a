"""The score-array steps of a selection run: ranking the pool, nearest earlier rows, coverage.

Checked against the papers taken literally (tests/selection/_reference.py) and against
scipy's distance routines as the reference for every distance.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from registry.errors import InputError
from registry.selection.d_optimal import design_matrix
from registry.selection.picking import (CALIBRATION, VALIDATION, Picks, coverage_gain,
                                        duplex_order, nearest_before, rank_pool)
from tests.selection._reference import duplex_1977, kennard_stone_1969


def _scores(seed: int, n: int, a: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.normal(size=(n, a)) * np.array([3.0, 1.0, 0.3][:a])


EIG = np.array([9.0, 1.0, 0.09])


def test_kennard_stone_augments_the_calibration_rows():
    # Source: Kennard & Stone, Technometrics 11:137 (1969), literal form in _reference.py,
    # on Mahalanobis-scaled scores (each column divided by the square root of its eigenvalue).
    T_cal, T_pool = _scores(0, 12), _scores(1, 40)
    picks = rank_pool(T_cal, T_pool, 7, "kennard-stone", eigenvalues=EIG)
    scaled = np.vstack([T_cal, T_pool]) / np.sqrt(EIG)
    expected = kennard_stone_1969(scaled, 7, already_selected=list(range(12)))
    assert picks.rows.tolist() == [i - 12 for i in expected]
    assert picks.use == (CALIBRATION,) * 7 and picks.random_state is None


def test_kennard_stone_without_calibration_starts_from_the_farthest_pair():
    # Source: Kennard & Stone (1969) start rule, literal form in _reference.py (Euclidean).
    T_pool = _scores(2, 30)
    picks = rank_pool(np.empty((0, 3)), T_pool, 5, "kennard-stone")
    assert picks.rows.tolist() == kennard_stone_1969(T_pool, 5)


def test_duplex_picks_in_snees_order():
    # Source: Snee, Technometrics 19:415 (1977), literal form in _reference.py; the send
    # list interleaves the sets as Duplex builds them: two calibration, two validation,
    # then one of each in turn.
    T_pool = _scores(3, 35)
    picks = rank_pool(_scores(4, 5), T_pool, 9, "duplex", eigenvalues=EIG)
    cal, val = duplex_1977(T_pool / np.sqrt(EIG), 5, 4)
    assert picks.rows.tolist() == [cal[0], cal[1], val[0], val[1], cal[2], val[2], cal[3],
                                   val[3], cal[4]]
    assert picks.use == (CALIBRATION, CALIBRATION, VALIDATION, VALIDATION, CALIBRATION,
                         VALIDATION, CALIBRATION, VALIDATION, CALIBRATION)
    assert duplex_order([10, 11, 12], [20, 21, 22, 23]) == (
        [10, 11, 20, 21, 12, 22, 23],
        [CALIBRATION, CALIBRATION, VALIDATION, VALIDATION, CALIBRATION, VALIDATION, VALIDATION])


def test_d_optimal_beats_every_random_design_and_is_seeded():
    # Source: the D-criterion itself, det(ZᵀZ) with Z = [1, scores] of the calibration rows
    # plus the picks (Fedorov, Theory of Optimal Experiments, 1972): an exchange optimum is
    # at least as good as any of 300 random designs of the same size.
    T_cal, T_pool = _scores(5, 6), _scores(6, 50)
    picks = rank_pool(T_cal, T_pool, 5, "d-optimal", random_state=123)
    assert picks.random_state == 123 and len(set(picks.rows.tolist())) == 5
    assert rank_pool(T_cal, T_pool, 5, "d-optimal", random_state=123).rows.tolist() == \
        picks.rows.tolist()

    def logdet(rows):
        Z = design_matrix(np.vstack([T_cal, T_pool[rows]]), True)
        return np.linalg.slogdet(Z.T @ Z)[1]

    best = logdet(picks.rows)
    rng = np.random.default_rng(0)
    assert all(logdet(rng.choice(50, 5, replace=False)) <= best + 1e-9 for _ in range(300))


def test_bad_method_and_too_few_duplex_picks():
    with pytest.raises(InputError, match="unknown method"):
        rank_pool(np.empty((0, 3)), _scores(0, 10), 3, "random")
    with pytest.raises(InputError, match="at least 4"):
        rank_pool(np.empty((0, 3)), _scores(0, 10), 3, "duplex")


def test_nearest_before_matches_scipy_distances():
    # Source: scipy.spatial.distance.cdist on the Mahalanobis-scaled scores.
    T_cal, T_pool = _scores(7, 8), _scores(8, 20)
    picks = Picks(np.array([4, 17, 2, 9]), (CALIBRATION,) * 4, "kennard-stone")
    near = nearest_before(T_cal, T_pool, picks, eigenvalues=EIG)
    S_cal, S_pool = T_cal / np.sqrt(EIG), T_pool / np.sqrt(EIG)
    for r, i in enumerate(picks.rows):
        before = np.vstack([S_cal, S_pool[picks.rows[:r]]])
        d = cdist(S_pool[[i]], before)[0]
        j = int(np.argmin(d))
        assert near.distance[r] == pytest.approx(d[j], rel=1e-12)
        if j < 8:
            assert (near.calibration_row[r], near.pick_rank[r]) == (j, -1)
        else:
            assert (near.calibration_row[r], near.pick_rank[r]) == (-1, j - 8)


def test_nearest_before_in_duplex_counts_only_the_own_set():
    # Source: Snee (1977): each set's maximin distance is to its own members only.
    T_pool = _scores(9, 12)
    use = (CALIBRATION, CALIBRATION, VALIDATION, VALIDATION, CALIBRATION)
    picks = Picks(np.array([0, 1, 2, 3, 4]), use, "duplex")
    near = nearest_before(_scores(10, 6), T_pool, picks)
    assert np.isnan(near.distance[0]) and np.isnan(near.distance[2])
    assert near.pick_rank[1] == 0 and near.pick_rank[3] == 2
    d = cdist(T_pool[[4]], T_pool[[0, 1]])[0]
    assert near.distance[4] == pytest.approx(d.min(), rel=1e-12)
    assert near.pick_rank[4] == int(np.argmin(d)) and (near.calibration_row == -1).all()


def test_coverage_gain_matches_brute_force_nearest_neighbours():
    # Source: scipy.spatial.distance.cdist; "inside" is the nearest-neighbour check of
    # prediction-time diagnostics: distance to the nearest calibration row no larger than
    # the largest nearest-neighbour distance within the calibration rows.
    T_cal, T_recent, T_picks = _scores(11, 15), _scores(12, 60) * 1.5, _scores(13, 4) * 2
    S = lambda T: T / np.sqrt(EIG)  # noqa: E731
    gain = coverage_gain(T_cal, T_recent, T_picks, eigenvalues=EIG)

    def brute(ref):
        d_ref = cdist(S(ref), S(ref))
        np.fill_diagonal(d_ref, np.inf)
        limit = d_ref.min(axis=1).max()
        d = cdist(S(T_recent), S(ref)).min(axis=1)
        return d.max(), float(np.mean(d <= limit)), limit

    after = np.vstack([T_cal, T_picks])
    for suffix, ref in (("now", T_cal), ("after", after)):
        gap, share, limit = brute(ref)
        assert gain[f"largest_gap_{suffix}"] == pytest.approx(gap, rel=1e-12)
        assert gain[f"inside_share_{suffix}"] == pytest.approx(share)
        assert gain[f"nn_limit_{suffix}"] == pytest.approx(limit, rel=1e-12)
    assert gain["n_recent"] == 60 and gain["distance"] == "mahalanobis"
    assert gain["largest_gap_after"] <= gain["largest_gap_now"]


def test_coverage_gain_without_calibration_rows_has_no_now_figures():
    gain = coverage_gain(np.empty((0, 3)), _scores(14, 10), _scores(15, 3))
    assert gain["largest_gap_now"] is None and gain["inside_share_now"] is None
    assert gain["largest_gap_after"] == pytest.approx(
        cdist(_scores(14, 10), _scores(15, 3)).min(axis=1).max(), rel=1e-12)
    assert gain["distance"] == "euclidean" and gain["inside_share_after"] is not None


def test_brought_inside_counts_only_neighbour_failures_within_the_fixed_limit():
    """Brute force with scipy's cdist: a row is brought inside when the nearest-neighbour
    check is its only failure and some pick is within today's limit (limit kept fixed)."""
    from scipy.spatial.distance import cdist

    from registry.selection.picking import brought_inside

    Z_recent, Z_picks = _scores(21, 30), _scores(22, 3)
    nn_only = np.arange(30) % 3 != 0
    limit = 1.0
    got = brought_inside(Z_recent, nn_only, Z_picks, limit, eigenvalues=EIG)
    w = 1 / np.sqrt(EIG)
    expected = nn_only & (cdist(Z_recent * w, Z_picks * w).min(axis=1) <= limit)
    np.testing.assert_array_equal(got, expected)
    assert not brought_inside(Z_recent, nn_only, np.empty((0, Z_recent.shape[1])), limit).any()
