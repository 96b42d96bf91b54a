"""Budget fitting and pick rationale, checked by hand arithmetic, scipy's
cdist, numpy.linalg and the matrix determinant lemma."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from registry.errors import InputError
from registry.selection import (budget_positions, coverage_summary, design_matrix,
                                fit_to_budget, pick_rationale)


def test_prefix_rule_stops_at_first_pick_that_does_not_fit():
    # Hand arithmetic: 100 + 250 = 350 <= 400; + 300 > 400 -> 2 picks, the later
    # 40 is not bought ahead of the 300 unless skip_expensive=True.
    costs = [100, 250, 300, 40]
    assert fit_to_budget(costs, 400) == 2
    assert budget_positions(costs, 400).tolist() == [0, 1]
    assert budget_positions(costs, 400, skip_expensive=True).tolist() == [0, 1, 3]
    assert fit_to_budget(costs, 400, skip_expensive=True) == 3
    assert fit_to_budget(costs, 0) == 0
    assert fit_to_budget(costs, 10_000) == 4
    assert fit_to_budget([], 100) == 0


def test_budget_equal_to_the_sum_fits_despite_rounding():
    # 0.1 + 0.2 is 0.30000000000000004 in binary floating point (IEEE 754).
    assert fit_to_budget([0.1, 0.2], 0.3) == 2


def test_bad_costs_and_budgets():
    with pytest.raises(InputError, match="cost of pick 2"):
        fit_to_budget([1, -5], 10)
    with pytest.raises(InputError, match="cost of pick 1"):
        fit_to_budget([np.nan], 10)
    with pytest.raises(InputError, match="budget"):
        fit_to_budget([1], -1)


def test_pick_rationale_against_direct_computation():
    rng = np.random.default_rng(0)
    T_cal, T_cand = rng.normal(size=(8, 2)), rng.normal(size=(30, 2)) * 2
    picks = [4, 17, 9]
    lam = np.array([2.0, 0.5])
    r = pick_rationale(T_cal, T_cand, picks, eigenvalues=lam)
    Zc, Zp = design_matrix(T_cal), design_matrix(T_cand[picks])
    for k, p in enumerate(picks):
        before = np.vstack([T_cal, T_cand[picks[:k]]])
        # Source: scipy cdist with the Mahalanobis-on-scores metric (V = eigenvalues).
        expected_nn = cdist(T_cand[[p]], before, metric="seuclidean", V=lam).min()
        assert r.nn_distance[k] == pytest.approx(expected_nn, rel=1e-12)
        Zb = np.vstack([Zc, Zp[:k]])
        M = Zb.T @ Zb
        # Source: numpy.linalg.inv for the leverage, slogdet for the ln det gain.
        assert r.leverage[k] == pytest.approx(Zp[k] @ np.linalg.inv(M) @ Zp[k], rel=1e-10)
        Za = np.vstack([Zb, Zp[k]])
        gain = np.linalg.slogdet(Za.T @ Za)[1] - np.linalg.slogdet(M)[1]
        assert r.log_det_gain[k] == pytest.approx(gain, rel=1e-10)
    assert [row["rank"] for row in r.rows()] == [1, 2, 3]


def test_pick_rationale_is_nan_while_the_design_is_singular():
    rng = np.random.default_rng(1)
    T = rng.normal(size=(10, 2))
    r = pick_rationale(np.empty((0, 2)), T, [0, 1, 2, 3])
    assert np.isnan(r.nn_distance[0]) and np.isnan(r.leverage[:3]).all()
    assert np.isfinite(r.leverage[3])  # three rows make [1, T] full rank
    assert r.nn_distance[1] == pytest.approx(np.linalg.norm(T[1] - T[0]))


def _brute_coverage(cal, recent):
    # Nearest-neighbour rule of prediction-time diagnostics (common practice):
    # inside when NN distance to calibration <= largest NN distance within it.
    D = cdist(cal, cal)
    np.fill_diagonal(D, np.inf)
    limit = D.min(axis=1).max()
    return np.mean(cdist(recent, cal).min(axis=1) <= limit), limit


def test_coverage_summary_against_full_distance_matrices():
    rng = np.random.default_rng(2)
    cal = rng.normal(size=(25, 3))
    recent = rng.normal(size=(200, 3)) * 1.5
    picks = rng.normal(size=(6, 3)) * 2
    s = coverage_summary(cal, recent, picks)
    share_now, nn_now = _brute_coverage(cal, recent)
    share_after, nn_after = _brute_coverage(np.vstack([cal, picks]), recent)
    assert s.n_recent == 200
    assert s.inside_share_now == pytest.approx(share_now)
    assert s.inside_share_after == pytest.approx(share_after)
    assert s.max_nn_now == pytest.approx(nn_now) and s.max_nn_after == pytest.approx(nn_after)
    lam = np.array([1.0, 4.0, 0.25])
    s_m = coverage_summary(cal, recent, picks, eigenvalues=lam)
    assert s_m.inside_share_now == pytest.approx(
        _brute_coverage(cal / np.sqrt(lam), recent / np.sqrt(lam))[0])


def test_coverage_summary_without_picks_and_bad_input():
    rng = np.random.default_rng(3)
    cal, recent = rng.normal(size=(10, 2)), rng.normal(size=(20, 2))
    s = coverage_summary(cal, recent, np.empty((0, 2)))
    assert s.inside_share_now == s.inside_share_after and s.max_nn_now == s.max_nn_after
    with pytest.raises(InputError, match="T_recent has 3 score columns"):
        coverage_summary(cal, rng.normal(size=(5, 3)), np.empty((0, 2)))
    with pytest.raises(InputError, match="at least 2 row"):
        coverage_summary(cal[:1], recent, np.empty((0, 2)))
