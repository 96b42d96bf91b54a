"""Validation statistics of predicted vs reference values, and a pass/fail verdict.

Definitions (e = ŷ − y, n samples):

* bias = ē
* RMSEP = √(Σe²/n)                           root mean square error of prediction
* SEP = √(Σ(e − ē)²/(n − 1))                 standard error of prediction: the
  bias-corrected standard deviation of the errors (ISO 12099:2017; Næs, Isaksson,
  Fearn & Davies, *A User-Friendly Guide to Multivariate Calibration and
  Classification*, 2002), so RMSEP² = bias² + SEP²·(n − 1)/n
* bias t = ē·√n / SEP, two-sided p from t(n − 1) — the one-sample t-test of
  the errors against 0 (equals ``scipy.stats.ttest_1samp(e, 0)``)
* slope, intercept: least-squares line ŷ = intercept + slope·y (common practice)
* R² = 1 − Σe²/Σ(y − ȳ)² (coefficient of determination of ŷ for y)
* SEC = √(Σe²/(n − A − 1)) when ``n_components`` is given (meaningful for
  calibration-set fits)

The reference method's reproducibility R is a 95 % limit on the difference of two
results, R = 2.77·σ_R (ISO 5725-6:1994, 4.1.4; ASTM E177). The acceptance rule
therefore compares SEP with σ_R = R/2.77 — a standard deviation with a standard
deviation — and the record also shows 1.96·SEP (the 95 % half-width of one
prediction's error) beside R.

Stored statistics written before revision 0003 used another layout: ``sdv`` held
the SEP and ``sep`` held the RMSEP. :func:`statistics_from_json` reads both.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

import numpy as np
from scipy import stats

from registry.errors import InputError
from registry.precision import LIMIT_FACTOR, sd_from_limit

#: Layout of :meth:`ValidationStatistics.to_json`; records without the key are layout 1
#: (``sdv`` = SEP, ``sep`` = RMSEP).
STATISTICS_LAYOUT = 2

#: Two-sided 95 % quantile of the normal distribution, as used in LIMIT_FACTOR = 1.96·√2.
Z_95 = LIMIT_FACTOR / math.sqrt(2.0)


@dataclass(frozen=True)
class ValidationStatistics:
    """Statistics of one validation (see the module docstring for the definitions)."""

    n: int
    bias: float
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

    @property
    def sigma_R(self) -> float | None:  # noqa: N802 (R, not r: reproducibility)
        """σ_R = R/2.77, the reproducibility standard deviation (ISO 5725-6)."""
        return None if self.reproducibility is None else sd_from_limit(self.reproducibility)

    @property
    def sep_over_sigma_r(self) -> float | None:
        """SEP/σ_R, the number the acceptance rule compares with its factor."""
        return None if self.sigma_R is None else self.sep / self.sigma_R

    @property
    def sep_95(self) -> float:
        """1.96·SEP: 95 % half-width of one prediction's error, comparable with R."""
        return float(Z_95 * self.sep)

    def to_json(self) -> dict:
        """Stored form: the fields, the layout number and the derived precision figures."""
        return {**asdict(self), "layout": STATISTICS_LAYOUT, "sigma_R": self.sigma_R,
                "sep_over_sigma_r": self.sep_over_sigma_r, "sep_95": self.sep_95}


def _current_layout(doc: dict) -> dict:
    d = dict(doc or {})
    if d.get("layout") is None and "sdv" in d:  # layout 1: sdv was the SEP, sep the RMSEP
        d["sep"] = d.pop("sdv")
    return d


def statistics_from_json(doc: dict) -> ValidationStatistics:
    """Read stored statistics of either layout (see the module docstring)."""
    names = {f.name for f in fields(ValidationStatistics)}
    return ValidationStatistics(**{k: v for k, v in _current_layout(doc).items() if k in names})


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
    sep = float(e.std(ddof=1))
    rmsep = float(np.sqrt(np.mean(e ** 2)))
    if sep > 0:
        bias_t = bias * np.sqrt(n) / sep
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
        n=n, bias=bias, sep=sep, rmsep=rmsep, slope=slope, intercept=intercept, r2=r2,
        bias_t=float(bias_t), bias_p=bias_p, sec=sec, n_components=n_components,
        reproducibility=None if reproducibility is None else float(reproducibility),
        y_min=float(y_ref.min()), y_max=float(y_ref.max()))


@dataclass(frozen=True)
class AcceptanceCriteria:
    """Pass/fail thresholds for a validation, configurable per property.

    Defaults and their sources:

    * ``bias_alpha = 0.05``: the bias must not be significant in a two-sided
      t-test at 95 % (ASTM E1655-style, from memory).
    * ``max_sep_over_sigma_r = 1.0``: SEP ≤ k·σ_R with σ_R = R/2.77 the reference
      method's reproducibility standard deviation (ISO 5725-6; ASTM E177). k = 1:
      the model is as precise as one more laboratory running the method (common
      practice). None disables the check.
    * ``min_samples = 20`` and ``min_samples_per_component = 4``:
      n ≥ max(20, 4·A) (validation set size, ASTM E1655-style, from memory).
    * ``min_r2``, ``max_abs_bias``: off by default (None).
    """

    bias_alpha: float = 0.05
    max_sep_over_sigma_r: float | None = 1.0
    min_samples: int = 20
    min_samples_per_component: int = 4
    min_r2: float | None = None
    max_abs_bias: float | None = None

    def to_json(self) -> dict:
        return asdict(self)

    def rule_text(self) -> str:
        """The rules in words, as the validation record and the trace show them."""
        return rule_text(self.to_json())


#: The key of the rule before revision 0003, which compared the RMSEP with k·R.
LEGACY_PRECISION_KEY = "max_sep_over_reproducibility"


def rule_text(criteria: dict) -> str:
    """Words for stored criteria of either generation.

    Criteria stored before revision 0003 carry ``max_sep_over_reproducibility``:
    that rule compared the RMSEP with k·R (a standard deviation with a 95 % limit)
    and is described as such, so an old record still says what it was judged by.
    """
    c = {**AcceptanceCriteria().to_json(), **{k: v for k, v in criteria.items()
                                              if k != "rule"}}
    parts = [f"n ≥ max({c['min_samples']}, {c['min_samples_per_component']}·A)",
             f"bias not significant (two-sided t-test, α = {c['bias_alpha']:g})"]
    if LEGACY_PRECISION_KEY in criteria:
        k = criteria[LEGACY_PRECISION_KEY]
        if k is not None:
            parts.append(f"RMSEP ≤ {k:g}·R (rule before revision 0003)")
    elif c["max_sep_over_sigma_r"] is not None:
        parts.append(f"SEP ≤ {c['max_sep_over_sigma_r']:g}·σ_R, σ_R = R/{LIMIT_FACTOR:.2f} "
                     "(ISO 5725-6)")
    if c.get("min_r2") is not None:
        parts.append(f"R² ≥ {c['min_r2']:g}")
    if c.get("max_abs_bias") is not None:
        parts.append(f"|bias| ≤ {c['max_abs_bias']:g}")
    return "; ".join(parts)


def precision_summary(statistics: dict, criteria: dict) -> dict:
    """What a reviewer reads about precision from a stored record of either layout.

    SEP, RMSEP and bias; R, σ_R, SEP/σ_R and 1.96·SEP; and the rule in words.
    """
    d = _current_layout(statistics)  # read key by key: a damaged record still shows what it has
    sep, R = d.get("sep"), d.get("reproducibility")
    sigma_R = sd_from_limit(R) if R else None
    return {"sep": sep, "rmsep": d.get("rmsep"), "bias": d.get("bias"), "reproducibility": R,
            "sigma_R": sigma_R,
            "sep_over_sigma_r": sep / sigma_R if sep is not None and sigma_R else None,
            "sep_95": Z_95 * sep if sep is not None else None,
            "rule": (criteria or {}).get("rule") or rule_text(criteria or {})}


def precision_text(summary: dict) -> str:
    """One line of a :func:`precision_summary`, for terminals and text traces."""
    def num(v, digits=4):
        return "n/a" if v is None else f"{v:.{digits}g}"

    text = f"SEP={num(summary['sep'])} RMSEP={num(summary['rmsep'])} bias={num(summary['bias'])}"
    if summary["reproducibility"] is not None:
        text += (f" SEP/σ_R={num(summary['sep_over_sigma_r'], 3)} "
                 f"(1.96·SEP={num(summary['sep_95'])} vs R={num(summary['reproducibility'])})")
    return text + f"; rule: {summary['rule']}"


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
    if c.max_sep_over_sigma_r is not None:
        if s.reproducibility is None:
            reasons.append("SEP check needs the reference method's reproducibility")
        elif s.sep_over_sigma_r > c.max_sep_over_sigma_r:
            reasons.append(f"SEP {s.sep:.4g} exceeds {c.max_sep_over_sigma_r:g}·σ_R = "
                           f"{c.max_sep_over_sigma_r * s.sigma_R:.4g} (SEP/σ_R = "
                           f"{s.sep_over_sigma_r:.3g}; σ_R = R/{LIMIT_FACTOR:.2f}, "
                           f"R = {s.reproducibility:.4g})")
    if c.min_r2 is not None and not s.r2 >= c.min_r2:
        reasons.append(f"R2 {s.r2:.4g} is below {c.min_r2:g}")
    if c.max_abs_bias is not None and abs(s.bias) > c.max_abs_bias:
        reasons.append(f"|bias| {abs(s.bias):.4g} exceeds {c.max_abs_bias:g}")
    return (not reasons), reasons
