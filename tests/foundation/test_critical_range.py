"""ISO 5725-6 critical range f(n)·σ_r for n results on one sample.

Sources: ISO 5725-6:1994 Table 1 (f = 2.8, 3.3, 3.6, 3.9 for n = 2…5; the larger n from
memory); the factors are the 95 % quantiles of the range of n standard normal results,
q(0.95; n, ∞), which scipy.stats.studentized_range computes as a reference.
"""

from __future__ import annotations


import numpy as np
import pytest
from scipy.stats import studentized_range

from registry.errors import InputError
from registry.precision import (CRITICAL_RANGE_FACTORS, LIMIT_FACTOR, critical_range,
                                critical_range_factor)


@pytest.mark.parametrize("n, printed", [(2, 2.8), (3, 3.3), (4, 3.6), (5, 3.9)])
def test_factors_as_printed_in_iso_5725_6(n, printed):
    assert critical_range_factor(n) == printed


@pytest.mark.parametrize("n", sorted(CRITICAL_RANGE_FACTORS))
def test_factors_are_the_studentized_range_quantiles_rounded(n):
    # q(0.95; n, ∞) by scipy, rounded to one decimal as the standard prints it
    q = studentized_range.ppf(0.95, n, np.inf)
    assert critical_range_factor(n) == round(float(q), 1)


def test_two_results_factor_is_the_repeatability_factor():
    # for n = 2 the range is |x1 − x2| and q(0.95; 2, ∞) = 1.96·√2 = 2.77 (ISO 5725-6,
    # ASTM E177), so the critical range of two results is r to the printed rounding
    assert studentized_range.ppf(0.95, 2, np.inf) == pytest.approx(LIMIT_FACTOR, rel=1e-3)
    assert critical_range(2, 1.0) == pytest.approx(2.8 / LIMIT_FACTOR)


def test_beyond_the_table_the_factor_keeps_growing_smoothly():
    # the range of more results spreads more: q(0.95; n, ∞) increases with n
    assert CRITICAL_RANGE_FACTORS[20] - 0.05 <= critical_range_factor(21) <= 5.1
    assert critical_range_factor(40) > critical_range_factor(30) > critical_range_factor(21)


def test_critical_range_covers_95_percent_of_simulated_ranges():
    # Monte Carlo check of the definition: ranges of n normal results with σ = r/2.77
    # exceed f(n)·σ_r about 5 % of the time (±1 % with 40,000 draws)
    rng = np.random.default_rng(5725)
    r = 0.2
    sigma = r / LIMIT_FACTOR
    for n in (2, 3, 4, 5):
        x = rng.normal(0.0, sigma, size=(40_000, n))
        exceed = np.mean(np.ptp(x, axis=1) > critical_range(n, r))
        assert 0.04 < exceed < 0.06, (n, exceed)


@pytest.mark.parametrize("n", [1, 0, -3, 2.5, True])
def test_fewer_than_two_results_have_no_range(n):
    with pytest.raises(InputError):
        critical_range_factor(n)

