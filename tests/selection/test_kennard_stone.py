"""Kennard–Stone selection, checked against Kennard & Stone (1969) taken
literally (full distance matrix), scipy's pdist, and the general-purpose
``kennard-stone`` package (3.0.1)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy.spatial.distance import pdist, squareform

from registry.errors import InputError
from registry.selection import kennard_stone
from tests.selection._reference import kennard_stone_1969


def random_data(seed=0, n=80, d=6):
    return np.random.default_rng(seed).normal(size=(n, d))


def grid_and_clusters(seed=1):
    """Integer 6×6 grid (many exactly equal distances) plus two tight clusters."""
    rng = np.random.default_rng(seed)
    gx, gy = np.meshgrid(np.arange(6), np.arange(6))
    grid = np.column_stack([gx.ravel(), gy.ravel()]).astype(float)
    clusters = np.vstack([rng.normal([9, 9], 0.3, size=(10, 2)),
                          rng.normal([-3, 2], 0.3, size=(10, 2))])
    return np.vstack([grid, clusters])


DATASETS = {"random": random_data(), "offset-spectra-like": random_data(2, 60, 40) * 0.01 + 1.0,
            "grid+clusters": grid_and_clusters()}


@pytest.mark.parametrize("name", DATASETS)
@pytest.mark.parametrize("start", ["farthest-pair", "mean", "farthest-from-mean"])
def test_picks_equal_the_1969_description(name, start):
    # Source: Kennard & Stone, Technometrics 11:137 (1969), brute force in _reference.py.
    X = DATASETS[name]
    k = 30
    assert kennard_stone(X, k, start=start).tolist() == kennard_stone_1969(X, k, start)


@pytest.mark.parametrize("name", DATASETS)
def test_augment_mode_equals_1969_description_seeded_with_existing_set(name):
    # Source: Kennard & Stone 1969 maximin step, started from the existing set.
    X = DATASETS[name]
    existing = np.random.default_rng(5).choice(len(X), size=7, replace=False)
    picks = kennard_stone(X, 20, already_selected=existing)
    assert picks.tolist() == kennard_stone_1969(X, 20, already_selected=existing.tolist())
    assert not set(picks) & set(existing)


def test_first_two_picks_are_the_most_distant_pair():
    # Source: scipy.spatial.distance.pdist (the diameter of the set).
    for seed in range(5):
        X = random_data(seed, 150, 4)
        D = squareform(pdist(X))
        picks = kennard_stone(X, 2)
        assert D[picks[0], picks[1]] == pytest.approx(D.max(), rel=1e-12)


def test_blocked_farthest_pair_with_many_blocks(monkeypatch):
    # Force tiny blocks so the blocked search crosses many block borders.
    import registry.selection._distance as dist
    monkeypatch.setattr(dist, "BLOCK_ELEMENTS", 500)
    X = random_data(3, 300, 5)
    D = squareform(pdist(X))
    i, j = kennard_stone(X, 2)
    assert D[i, j] == pytest.approx(D.max(), rel=1e-12)


def test_returned_distances_are_nearest_distances_before_each_pick():
    # Source: Kennard & Stone 1969: the maximin value of each step.
    X = random_data(4, 50, 3)
    D = squareform(pdist(X))
    picks, dist = kennard_stone(X, 10, return_distances=True)
    assert np.isnan(dist[0])
    for r in range(1, 10):
        assert dist[r] == pytest.approx(D[picks[r], picks[:r]].min(), rel=1e-10)
    assert np.all(np.diff(dist[1:]) <= 1e-12)  # maximin values never increase


def test_mahalanobis_equals_euclidean_on_columns_divided_by_sqrt_variance():
    # Source: H² = Σ(tᵢₐ − tⱼₐ)²/λₐ (Mahalanobis distance on uncorrelated scores).
    T = random_data(6, 70, 3) * [5.0, 1.0, 0.2]
    lam = T.var(axis=0, ddof=1)
    expected = kennard_stone_1969(T / np.sqrt(lam), 15)
    assert kennard_stone(T, 15, metric="mahalanobis").tolist() == expected
    assert kennard_stone(T, 15, metric="mahalanobis", eigenvalues=lam).tolist() == expected


def test_float32_gives_the_float64_picks_on_well_separated_data():
    # Common practice: float32 is documented as approximate only for near-ties.
    X = random_data(7, 300, 30)
    assert (kennard_stone(X, 40, dtype=np.float32) == kennard_stone(X, 40)).all()


def test_progress_is_called_with_picks_done():
    calls = []
    kennard_stone(random_data(), 5, progress=calls.append)
    assert calls == [1, 2, 3, 4, 5]


# --- the general-purpose kennard-stone package (3.0.1) as a second opinion ---------

def _package_pick_order(X):
    """Pick order of the kennard-stone package: it returns the reverse of it."""
    from kennard_stone._core._core import _KennardStone
    return list(_KennardStone(n_groups=1, scale=True).get_indexes(X)[0])[::-1]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_matches_kennard_stone_package_with_its_scaling_and_start(seed):
    # Source: kennard-stone 3.0.1 autoscales (StandardScaler) and starts from the
    # sample farthest from the mean; we replicate both.
    X = random_data(seed, 120, 8) * np.arange(1, 9)
    X[:, 3] = 2.5  # a constant column: the package drops it, autoscaling ignores it
    ours = kennard_stone(X, 40, start="farthest-from-mean", scale="auto")
    assert ours.tolist() == _package_pick_order(X)[:40]


def test_matches_kennard_stone_package_public_split():
    import kennard_stone as ks_package
    X = random_data(9, 100, 5)
    train_idx, test_idx = ks_package.train_test_split(X, np.arange(100), test_size=0.3)[2:]
    ours = kennard_stone(X, 70, start="farthest-from-mean", scale="auto")
    assert set(ours.tolist()) == set(train_idx.tolist())


# --- duplicates and bad input -------------------------------------------------------

def test_duplicates_raise_stop_or_allow():
    X = np.vstack([random_data(1, 5, 3)] * 3)  # every row three times
    with pytest.raises(InputError, match="only 5 distinct"):
        kennard_stone(X, 6)
    assert sorted(kennard_stone(X, 6, on_duplicates="stop").tolist()) == sorted(
        kennard_stone(X, 5).tolist())
    allowed = kennard_stone(X, 15, on_duplicates="allow")
    assert sorted(allowed.tolist()) == list(range(15))
    # After the 5 distinct rows, remaining duplicates come in index order.
    assert allowed[5:].tolist() == sorted(allowed[5:].tolist())


def test_all_identical_rows():
    X = np.ones((4, 3))
    with pytest.raises(InputError, match="only 1 distinct"):
        kennard_stone(X, 2)
    assert kennard_stone(X, 1).tolist() == [0]
    assert kennard_stone(X, 3, on_duplicates="allow").tolist() == [0, 1, 2]


@pytest.mark.parametrize("n_select, match", [(0, "at least 1"), (-2, "at least 1"),
                                             (2.5, "integer"), (True, "integer"),
                                             (81, "only 80 candidate")])
def test_bad_n_select(n_select, match):
    with pytest.raises(InputError, match=match):
        kennard_stone(random_data(), n_select)


def test_nan_and_inf_are_located():
    X = random_data()
    X[3, 1] = np.nan
    with pytest.raises(InputError, match="row 3, column 1 is nan"):
        kennard_stone(X, 3)
    X[3, 1] = np.inf
    with pytest.raises(InputError, match="row 3, column 1 is inf"):
        kennard_stone(X, 3)


def test_other_bad_arguments():
    X = random_data()
    with pytest.raises(InputError, match="start must be one of"):
        kennard_stone(X, 3, start="centre")
    with pytest.raises(InputError, match="metric must be one of"):
        kennard_stone(X, 3, metric="cosine")
    with pytest.raises(InputError, match="cannot be combined"):
        kennard_stone(X, 3, metric="mahalanobis", scale="auto")
    with pytest.raises(InputError, match="outside 0..79"):
        kennard_stone(X, 3, already_selected=[1, 80])
    with pytest.raises(InputError, match="more than once"):
        kennard_stone(X, 3, already_selected=[1, 1])
    with pytest.raises(InputError, match="only 2 candidate"):
        kennard_stone(X[:5], 3, already_selected=[0, 1, 2])
    with pytest.raises(InputError, match="2-D"):
        kennard_stone(np.zeros(5), 1)
    with pytest.raises(InputError, match="eigenvalues"):
        kennard_stone(X, 3, metric="mahalanobis", eigenvalues=[1.0, -1.0, 1, 1, 1, 1])


def test_exact_pair_start_refused_above_the_size_limit_with_cost_and_alternatives():
    X = random_data(0, 60, 3)
    with pytest.raises(InputError, match="start='mean' or start='approx-farthest'") as err:
        kennard_stone(X, 3, max_exact_pair_rows=50)
    assert "multiply-adds" in str(err.value)
    assert kennard_stone(X, 3, start="mean", max_exact_pair_rows=50).size == 3


def test_approx_farthest_start_is_two_passes():
    # Definition in the docstring: farthest from the mean, then farthest from that.
    X = random_data(8, 90, 4)
    a, b = kennard_stone(X, 2, start="approx-farthest")
    assert a == int(np.argmax(((X - X.mean(axis=0)) ** 2).sum(axis=1)))
    assert b == int(np.argmax(((X - X[a]) ** 2).sum(axis=1)))


# --- properties ------------------------------------------------------------------------

@settings(max_examples=40, deadline=None)
@given(data=st.data())
def test_properties(data):
    n = data.draw(st.integers(2, 25))
    d = data.draw(st.integers(1, 4))
    X = data.draw(hnp.arrays(np.float64, (n, d), elements=st.integers(-3, 3).map(float)))
    fixed = data.draw(st.lists(st.integers(0, n - 1), unique=True, max_size=n - 1))
    k = data.draw(st.integers(1, n - len(fixed)))
    start = data.draw(st.sampled_from(["farthest-pair", "approx-farthest", "mean",
                                       "farthest-from-mean"]))
    picks = kennard_stone(X, k, already_selected=fixed or None, start=start,
                          on_duplicates="allow")
    assert len(picks) == k
    assert len(set(picks.tolist())) == k
    assert not set(picks.tolist()) & set(fixed)
