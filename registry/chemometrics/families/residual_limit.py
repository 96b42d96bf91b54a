"""Residual (Q) limit by Box's scaled chi-squared approximation.

A residual sum of squares Q = Σ eⱼ² of normally distributed residuals with
covariance eigenvalues λⱼ is a weighted sum of χ²₁ variables. Box (Ann. Math.
Stat. 25:290, 1954) approximates it by g·χ²(h) with the same mean and
variance:

    θ1 = Σλⱼ,  θ2 = Σλⱼ²,  g = θ2/θ1,  h = θ1²/θ2.

Nomikos & MacGregor (Technometrics 37:41, 1995) match the same two moments
from observed Q values of mean m and variance v: g = v/(2m), h = 2m²/v.

The Q values or residuals given here must stand for *new* samples (for
example leave-one-out residuals): fitted calibration residuals are smaller
than those of new samples and would give too tight a limit.

This is the families' own copy of the limit; when the shared Box limit lands
in :mod:`registry.chemometrics.diagnostics`, :func:`box_residual_limit` can
simply call it.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from registry.errors import InputError


def box_residual_limit(confidence: float, *, eigenvalues=None, q_values=None) -> float:
    """Upper ``confidence`` quantile of Q by Box's g·χ²(h).

    Parameters
    ----------
    confidence : float
        In (0, 1), e.g. 0.95.
    eigenvalues : array_like, optional
        Eigenvalues of the residual covariance (Box 1954 moments).
    q_values : array_like, optional
        Observed Q values (Nomikos & MacGregor 1995 moments). Give exactly
        one of ``eigenvalues`` and ``q_values``.

    Returns
    -------
    float
        g·χ²⁻¹(confidence; h); 0 when the residuals are all zero.
    """
    if not 0.0 < float(confidence) < 1.0:
        raise InputError(f"confidence must be in (0, 1), got {confidence!r}", field="confidence")
    if (eigenvalues is None) == (q_values is None):
        raise InputError("give exactly one of eigenvalues and q_values", field="eigenvalues")
    if eigenvalues is not None:
        lam = np.asarray(eigenvalues, dtype=np.float64).reshape(-1)
        theta1, theta2 = float(lam.sum()), float(np.sum(lam ** 2))
        if theta1 <= 0.0:
            return 0.0
        g, h = theta2 / theta1, theta1 ** 2 / theta2
    else:
        q = np.asarray(q_values, dtype=np.float64).reshape(-1)
        if q.size < 2:
            raise InputError("need at least two Q values for their variance", field="q_values")
        m, v = float(q.mean()), float(q.var(ddof=1))
        if m <= 0.0:
            return 0.0
        if v <= 0.0:
            return m  # every Q equal: nothing to spread
        g, h = v / (2.0 * m), 2.0 * m * m / v
    return float(g * stats.chi2.ppf(confidence, h))
