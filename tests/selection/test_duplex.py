"""Duplex split, checked against Snee (1977) taken literally (_reference.py)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist, squareform

from registry.errors import InputError
from registry.selection import duplex
from tests.selection._reference import duplex_1977
from tests.selection.test_kennard_stone import grid_and_clusters, random_data


@pytest.mark.parametrize("X", [random_data(0, 40, 3), random_data(1, 33, 6),
                               grid_and_clusters()], ids=["random", "random-6d", "grid"])
@pytest.mark.parametrize("n_cal, n_val", [(10, 10), (15, 5), (4, 12), (20, 13)])
def test_equals_snee_1977_description(X, n_cal, n_val):
    # Source: Snee, Technometrics 19:415 (1977), brute force in _reference.py.
    if n_cal + n_val > len(X):
        pytest.skip("sizes exceed the data")
    cal, val = duplex(X, n_cal, n_val)
    ref_cal, ref_val = duplex_1977(X, n_cal, n_val)
    assert cal.tolist() == ref_cal
    assert val.tolist() == ref_val


def test_first_pair_is_the_diameter_and_sets_are_disjoint():
    # Source: scipy.spatial.distance.pdist.
    X = random_data(2, 50, 4)
    D = squareform(pdist(X))
    cal, val = duplex(X, 20, 20)
    assert D[cal[0], cal[1]] == pytest.approx(D.max(), rel=1e-12)
    rest = np.setdiff1d(np.arange(50), cal[:2])
    assert D[val[0], val[1]] == pytest.approx(D[np.ix_(rest, rest)].max(), rel=1e-12)
    assert not set(cal) & set(val) and len(set(cal)) == 20 and len(set(val)) == 20


def test_bad_sizes():
    X = random_data(0, 10, 2)
    with pytest.raises(InputError, match="n_cal must be at least 2"):
        duplex(X, 1, 3)
    with pytest.raises(InputError, match="exceeds the 10 rows"):
        duplex(X, 6, 5)
    with pytest.raises(InputError, match="refused above"):
        duplex(X, 3, 3, max_exact_pair_rows=5)
