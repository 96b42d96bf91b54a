"""Precision of a test method: repeatability r and reproducibility R are 95 % limits.

r and R are limits on the absolute difference of *two* results that is exceeded with a
probability of about 5 % (ISO 5725-6:1994, 4.1.4; ASTM E177). For normally distributed
results with standard deviation σ, that difference has standard deviation σ·√2, so

    r = 1.96·√2·σ_r ≈ 2.77·σ_r        R = 1.96·√2·σ_R ≈ 2.77·σ_R

Every place that turns a published r or R into a standard deviation (acceptance of a
model against its reference method, the synthetic reference generator, repeat checks)
uses these two functions, so the factor has one definition.
"""

from __future__ import annotations

import math

from .errors import InputError

#: 1.96·√2 ≈ 2.772: the factor between a 95 % difference limit and one result's SD
#: (ISO 5725-6:1994, 4.1.4; ASTM E177).
LIMIT_FACTOR = 1.96 * math.sqrt(2.0)


def sd_from_limit(limit: float) -> float:
    """Standard deviation of one result from a 95 % difference limit (r or R)."""
    return float(limit) / LIMIT_FACTOR


def limit_from_sd(sd: float) -> float:
    """95 % difference limit (r or R) from the standard deviation of one result."""
    return float(sd) * LIMIT_FACTOR


#: Critical range factors f(n) for n = 2, 3, … results on one sample, 95 % level
#: (ISO 5725-6:1994, Table 1; n = 2–5 are 2.8, 3.3, 3.6, 3.9, the larger n from
#: memory). They are the 95 % quantiles of the range of n independent standard
#: normal results, q(0.95; n, ∞), rounded to one decimal as the standard prints them.
CRITICAL_RANGE_FACTORS: dict[int, float] = {
    2: 2.8, 3: 3.3, 4: 3.6, 5: 3.9, 6: 4.0, 7: 4.2, 8: 4.3, 9: 4.4, 10: 4.5,
    11: 4.6, 12: 4.6, 13: 4.7, 14: 4.7, 15: 4.8, 16: 4.8, 17: 4.9, 18: 4.9, 19: 5.0,
    20: 5.0,
}


def critical_range_factor(n: int) -> float:
    """f(n): the range of n results on one sample exceeds f(n)·σ_r with about 5 % probability.

    Parameters
    ----------
    n : int
        Number of results, at least 2.

    Returns
    -------
    float
        ISO 5725-6 Table 1 for n ≤ 20; beyond it the quantile q(0.95; n, ∞) of
        the studentized range itself (scipy), which the table rounds.

    References
    ----------
    ISO 5725-6:1994, checking the acceptability of results under repeatability
    conditions (critical range CR₀.₉₅(n) = f(n)·σ_r; clause numbers from memory).
    The quantiles are those of the range of n normal variates, tabulated by
    Harter (Ann. Math. Stat. 31:1122, 1960; from memory).
    """
    if isinstance(n, bool) or int(n) != n or n < 2:
        raise InputError(f"a range needs at least 2 results, got n = {n!r}", field="n")
    n = int(n)
    if n in CRITICAL_RANGE_FACTORS:
        return CRITICAL_RANGE_FACTORS[n]
    from scipy.stats import studentized_range

    return float(studentized_range.ppf(0.95, n, math.inf))


def critical_range(n: int, repeatability: float) -> float:
    """ISO 5725-6 critical range f(n)·σ_r for n results, σ_r from the repeatability limit r."""
    return critical_range_factor(n) * sd_from_limit(repeatability)
