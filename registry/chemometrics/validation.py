"""Validation statistics of predicted vs reference values, and a pass/fail verdict.

Definitions (e = ŷ − y, n samples; ASTM E1655 / D8321-style, from memory):

* bias = ē
* SDV = √(Σ(e − ē)²/(n − 1))                  standard deviation of the errors
* SEP = √(Σe²/n)                               reported as SEP (RMS) = RMSEP
* bias t = ē·√n / SDV, two-sided p from t(n − 1) — the one-sample t-test of
  the errors against 0 (equals ``scipy.stats.ttest_1samp(e, 0)``)
* slope, intercept: least-squares line ŷ = intercept + slope·y (common practice)
* R² = 1 − Σe²/Σ(y − ȳ)² (coefficient of determination of ŷ for y)
* SEC = √(Σe²/(n − A − 1)) when ``n_components`` is given (meaningful for
  calibration-set fits)
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from registry.errors import InputError


@dataclass(frozen=True)
class ValidationStatistics:
    n: int
    bias: float
    sdv: float
    sep: float
    rmsep: float
    slope: float
    intercept: float
    r2: float
    bias_t: float
    bias_p: float
    sec: float | None = None
    n_components: int | None = None
    reproducibility: float | None = None
    y_min: float | None = None
    y_max: float | None = None

    def to_json(self) -> dict:
        return asdict(self)


def validation_statistics(y_ref, y_pred, n_components: int | None = None,
                          reproducibility: float | None = None) -> ValidationStatistics:
    """Statistics of ``y_pred`` against ``y_ref`` (see module docstring).

    Parameters
    ----------
    y_ref, y_pred : array-like of shape (n,)
    n_components : int, optional
        Number of PLS components, for SEC.
    reproducibility : float, optional
        Reproducibility R of the reference method, kept for the verdict.
    """
    y_ref = np.asarray(y_ref, dtype=np.float64).reshape(-1)
    y_pred = np.asarray(y_pred, dtype=np.float64).reshape(-1)
    if y_ref.shape != y_pred.shape:
        raise InputError(f"{y_ref.size} reference values but {y_pred.size} predictions",
                         field="y_pred")
    n = y_ref.size
    if n < 3:
        raise InputError(f"need at least 3 samples for validation statistics, got {n}",
                         field="y_ref")
    for name, v in (("y_ref", y_ref), ("y_pred", y_pred)):
        if not np.all(np.isfinite(v)):
            raise InputError(f"{name} value {int(np.flatnonzero(~np.isfinite(v))[0])} is not finite",
                             field=name)
    e = y_pred - y_ref
    bias = float(e.mean())
    sdv = float(e.std(ddof=1))
    sep = float(np.sqrt(np.mean(e ** 2)))
    if sdv > 0:
        bias_t = bias * np.sqrt(n) / sdv
        bias_p = float(2.0 * stats.t.sf(abs(bias_t), n - 1))
    else:
        bias_t, bias_p = (0.0, 1.0) if bias == 0 else (np.copysign(np.inf, bias), 0.0)
    y_c = y_ref - y_ref.mean()
    ss_y = float(y_c @ y_c)
    if ss_y > 0:
        slope = float(y_c @ (y_pred - y_pred.mean()) / ss_y)
        r2 = float(1.0 - (e @ e) / ss_y)
    else:
        slope, r2 = float("nan"), float("nan")
    intercept = float(y_pred.mean() - slope * y_ref.mean())
    sec = None
    if n_components is not None:
        dof = n - int(n_components) - 1
        if dof <= 0:
            raise InputError(f"SEC needs n > A + 1 (n={n}, A={n_components})",
                             field="n_components")
        sec = float(np.sqrt((e @ e) / dof))
    if reproducibility is not None and not float(reproducibility) > 0:
        raise InputError("reproducibility must be positive", field="reproducibility")
    return ValidationStatistics(
        n=n, bias=bias, sdv=sdv, sep=sep, rmsep=sep, slope=slope, intercept=intercept, r2=r2,
        bias_t=float(bias_t), bias_p=bias_p, sec=sec, n_components=n_components,
        reproducibility=None if reproducibility is None else float(reproducibility),
        y_min=float(y_ref.min()), y_max=float(y_ref.max()))


@dataclass(frozen=True)
class AcceptanceCriteria:
    """Pass/fail thresholds for a validation, configurable per property.

    Defaults and their sources:

    * ``bias_alpha = 0.05``: the bias must not be significant in a two-sided
      t-test at 95 % (ASTM E1655-style, from memory).
    * ``max_sep_over_reproducibility = 1.0``: SEP ≤ k·R of the reference
      method (common practice; the model cannot beat its reference method and
      should not be worse than its reproducibility). None disables the check.
    * ``min_samples = 20`` and ``min_samples_per_component = 4``:
      n ≥ max(20, 4·A) (validation set size, ASTM E1655-style, from memory).
    * ``min_r2``, ``max_abs_bias``: off by default (None).
    """

    bias_alpha: float = 0.05
    max_sep_over_reproducibility: float | None = 1.0
    min_samples: int = 20
    min_samples_per_component: int = 4
    min_r2: float | None = None
    max_abs_bias: float | None = None

    def to_json(self) -> dict:
        return asdict(self)


def verdict(statistics: ValidationStatistics, criteria: AcceptanceCriteria | None = None
            ) -> tuple[bool, list[str]]:
    """Apply ``criteria`` to ``statistics``; returns (passed, reasons for failure)."""
    c = criteria or AcceptanceCriteria()
    s = statistics
    reasons: list[str] = []
    needed = c.min_samples
    if s.n_components is not None:
        needed = max(needed, c.min_samples_per_component * int(s.n_components))
    if s.n < needed:
        reasons.append(f"too few validation samples: n = {s.n}, need at least {needed}")
    if s.bias_p < c.bias_alpha:
        reasons.append(f"bias {s.bias:.4g} is significant (t = {s.bias_t:.3g}, "
                       f"p = {s.bias_p:.3g} < {c.bias_alpha})")
    if c.max_sep_over_reproducibility is not None:
        if s.reproducibility is None:
            reasons.append("SEP check needs the reference method's reproducibility")
        elif s.sep > c.max_sep_over_reproducibility * s.reproducibility:
            reasons.append(f"SEP {s.sep:.4g} exceeds {c.max_sep_over_reproducibility:g} x "
                           f"reproducibility {s.reproducibility:.4g}")
    if c.min_r2 is not None and not s.r2 >= c.min_r2:
        reasons.append(f"R2 {s.r2:.4g} is below {c.min_r2:g}")
    if c.max_abs_bias is not None and abs(s.bias) > c.max_abs_bias:
        reasons.append(f"|bias| {abs(s.bias):.4g} exceeds {c.max_abs_bias:g}")
    return (not reasons), reasons
