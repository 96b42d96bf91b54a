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

#: 1.96·√2 ≈ 2.772: the factor between a 95 % difference limit and one result's SD
#: (ISO 5725-6:1994, 4.1.4; ASTM E177).
LIMIT_FACTOR = 1.96 * math.sqrt(2.0)


def sd_from_limit(limit: float) -> float:
    """Standard deviation of one result from a 95 % difference limit (r or R)."""
    return float(limit) / LIMIT_FACTOR


def limit_from_sd(sd: float) -> float:
    """95 % difference limit (r or R) from the standard deviation of one result."""
    return float(sd) * LIMIT_FACTOR
