"""SPXY checked against Galvão et al., Talanta 67:736 (2005): a worked example by hand,
the paper's distance taken literally (full matrices from scipy.spatial.distance.cdist),
and Kennard & Stone (1969) when the reference values carry no information."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from registry.errors import InputError
from registry.selection import kennard_stone
from registry.selection.spxy import spxy

from ._reference import max_min_picks


def spxy_2005(X, y, k, already_selected=()):
    """Galvão et al. (2005) literally: d = d_x/max d_x + d_y/max d_y, then the KS loop."""
    X = np.asarray(X, dtype=float)
    Y = np.asarray(y, dtype=float).reshape(len(X), -1)
    dx, dy = cdist(X, X), cdist(Y, Y)
    D = dx / dx.max() + (dy / dy.max() if dy.max() > 0 else 0.0)
    return max_min_picks(D, k, already_selected=already_selected)


# x = 0, 1, 3, 7 and y = 0, 4, 1, 2: max d_x = 7, max d_y = 4. Joint distances
# (0,1) 1/7+4/4 = 1.143, (0,2) 3/7+1/4 = 0.679, (0,3) 7/7+2/4 = 1.5,
# (1,2) 2/7+3/4 = 1.036, (1,3) 6/7+2/4 = 1.357, (2,3) 4/7+1/4 = 0.821.
X_HAND = np.array([[0.0], [1.0], [3.0], [7.0]])
Y_HAND = np.array([0.0, 4.0, 1.0, 2.0])


def test_worked_example_by_hand():
    # Start: the farthest pair (0, 3) at 1.5. Then row 1 is 1.143 from its nearest
    # chosen row (0) and row 2 only 0.679 (also row 0): row 1 comes next, row 2 last.
    picks, gaps = spxy(X_HAND, Y_HAND, 4, return_distances=True)
    assert picks.tolist() == [0, 3, 1, 2]
    assert np.isnan(gaps[0])
    np.testing.assert_allclose(gaps[1:], [1.5, 1 / 7 + 1.0, 3 / 7 + 1 / 4])
    # Kennard–Stone on x alone takes row 2 (3 from row 0) before row 1 (1 from row 0):
    # the reference values change the order.
    assert kennard_stone(X_HAND, 4).tolist() == [0, 3, 2, 1]


def test_worked_example_augment_mode_by_hand():
    # With row 2 already in the set: distances from it are 0.679 (row 0), 1.036 (row 1),
    # 0.821 (row 3), so row 1 first; then row 0 is min(0.679, 1.143) = 0.679 and row 3
    # min(0.821, 1.357) = 0.821 from the set, so row 3.
    assert spxy(X_HAND, Y_HAND, 2, already_selected=[2]).tolist() == [1, 3]


@pytest.mark.parametrize("seed", range(4))
def test_equals_the_2005_description(seed):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(60, 8)) * rng.uniform(0.1, 3.0, 8)
    y = X[:, 0] - 0.5 * X[:, 3] + rng.normal(0, 0.5, 60)
    assert spxy(X, y, 25).tolist() == spxy_2005(X, y, 25)
    existing = rng.choice(60, 10, replace=False)
    assert (spxy(X, y, 20, already_selected=existing).tolist()
            == spxy_2005(X, y, 20, already_selected=existing.tolist()))


def test_several_properties_use_euclidean_distance_of_the_value_rows():
    rng = np.random.default_rng(7)
    X = rng.normal(size=(40, 5))
    Y = rng.normal(size=(40, 2))
    assert spxy(X, Y, 15).tolist() == spxy_2005(X, Y, 15)


def test_constant_values_give_kennard_stone():
    # Source: Kennard & Stone (1969); with d_y = 0 everywhere SPXY is KS on X.
    X = np.random.default_rng(3).normal(size=(50, 6))
    assert spxy(X, np.full(50, 2.5), 20).tolist() == kennard_stone(X, 20).tolist()


def test_bad_input_is_refused():
    X = np.zeros((5, 2))
    X[:, 0] = np.arange(5)
    with pytest.raises(InputError) as err:
        spxy(X, np.arange(4.0), 2)
    assert err.value.field == "y"
    with pytest.raises(InputError) as err:
        spxy(X, [0, 1, 2, np.nan, 4], 2)
    assert err.value.field == "y"
    with pytest.raises(InputError) as err:
        spxy(X, np.arange(5.0), 4, already_selected=[0, 1])
    assert err.value.field == "n_select"
