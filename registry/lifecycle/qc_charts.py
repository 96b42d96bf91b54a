"""Control charts for QC results of a model in use: individuals/moving-range and EWMA.

A lab checks a deployed model by measuring a QC material at intervals and
charting the results (ASTM D6299). Charts here take the results in time
order, set limits from a baseline period and report the points that signal.

Conventions
-----------
* **Baseline**: limits come from the first ``baseline`` results (default 20,
  common practice for a new chart), or from all results if there are fewer.
  They are then applied to *every* result, baseline included, so a baseline
  that itself is out of control shows up. A known ``center`` and/or ``sigma``
  (e.g. from an earlier chart) replaces the baseline estimate.
* **σ̂ from moving ranges** of span 2: σ̂ = MR̄/d₂ with d₂ = 1.128, so the
  individuals limits are centre ± 3σ̂ = x̄ ± 2.66·MR̄ and the moving-range upper
  limit is D₄·MR̄ = 3.267·MR̄ (NIST/SEMATECH e-Handbook of Statistical Methods,
  §6.3.2; ASTM D6299).
* **EWMA** (e-Handbook §6.3.2.4): z₀ = centre, z_t = λx_t + (1 − λ)z_{t−1};
  limits centre ± L·σ·√(λ/(2 − λ)·(1 − (1 − λ)^{2t})) (exact, default) or the
  asymptotic centre ± L·σ·√(λ/(2 − λ)). λ = 0.4 by default, as ASTM D6299 is
  recalled to use (from memory, not checked against the standard's text).
* **Run rules** (Western Electric, *Statistical Quality Control Handbook*,
  1956; Nelson, J. Quality Technology 16:237, 1984), "beyond" meaning
  strictly beyond:

  1. one point beyond 3σ;
  2. two of three consecutive points beyond 2σ on the same side;
  3. four of five consecutive points beyond 1σ on the same side;
  4. ``run_length`` consecutive points on the same side of the centre line
     (default 9 as in Nelson 1984; the 1956 handbook used 8 — both common
     practice). A point exactly on the centre line ends a run;
  5. EWMA beyond its limits;
  6. moving range above its upper limit.

  Every window the rules define is evaluated, from the first points of the
  chart on; before ``window`` points exist, the window is the points so far
  (two of the first two results beyond 2σ lie in every window of three that
  holds them). A pattern is reported at the point that completes it: the
  newest point of its window, itself beyond the zone (rules 2–3) or on the
  run's side (rule 4). That is the first point at which the pattern can be
  known, as a chart is read while results arrive (the QC service judges each
  new point once). A window whose newest point does not count adds nothing:
  its counted points all lie in the window that ends at the last of them. So
  each point signals at most once per rule and overlapping windows over the
  same points give one signal; a pattern that goes on (a third point beyond
  2σ, a tenth point of a run) signals again at each new point, each being
  fresh evidence of the shift.

Signal indices are 0-based positions in the input.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from registry.errors import InputError
from registry.plain_json import plain_json

#: d₂ for ranges of 2 (tabulated; exactly 2/√π = 1.12838).
D2 = 1.128
#: d₃ for ranges of 2 (tabulated; exactly √(2 − 4/π) = 0.85250).
D3 = 0.8525
#: Individuals-chart factor: limits x̄ ± E2·MR̄ with E2 = 3/d₂ ≈ 2.66.
E2 = 3.0 / D2
#: Moving-range upper-limit factor D₄ = 1 + 3·d₃/d₂ ≈ 3.267 (D₃ = 0: no lower limit).
D4 = 1.0 + 3.0 * D3 / D2

DEFAULT_BASELINE = 20
DEFAULT_RUN_LENGTH = 9
DEFAULT_LAMBDA = 0.4


class Rule(StrEnum):
    """Why a point signals."""

    BEYOND_3_SIGMA = "beyond_3_sigma"
    TWO_OF_THREE_BEYOND_2_SIGMA = "2_of_3_beyond_2_sigma"
    FOUR_OF_FIVE_BEYOND_1_SIGMA = "4_of_5_beyond_1_sigma"
    RUN_ON_ONE_SIDE = "run_on_one_side"
    EWMA_BEYOND_LIMITS = "ewma_beyond_limits"
    MR_ABOVE_UCL = "mr_above_ucl"


def rule_name(rule: Rule | str, run_length: int = DEFAULT_RUN_LENGTH) -> str:
    """The rule's own short name, as the run rules are stated (module notes): "1 beyond
    3σ", "2 of 3 beyond 2σ", "4 of 5 beyond 1σ", "9 in a row on one side", ..."""
    return {
        Rule.BEYOND_3_SIGMA: "1 beyond 3σ",
        Rule.TWO_OF_THREE_BEYOND_2_SIGMA: "2 of 3 beyond 2σ",
        Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA: "4 of 5 beyond 1σ",
        Rule.RUN_ON_ONE_SIDE: f"{int(run_length)} in a row on one side",
        Rule.EWMA_BEYOND_LIMITS: "EWMA beyond its limits",
        Rule.MR_ABOVE_UCL: "moving range above its limit",
    }[Rule(rule)]


#: The chart each rule reads: the individuals chart (rules 1–4), the EWMA, the moving range.
RULE_CHART = {Rule.BEYOND_3_SIGMA: "individuals", Rule.TWO_OF_THREE_BEYOND_2_SIGMA: "individuals",
              Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA: "individuals",
              Rule.RUN_ON_ONE_SIDE: "individuals", Rule.EWMA_BEYOND_LIMITS: "ewma",
              Rule.MR_ABOVE_UCL: "moving_range"}


@dataclass(frozen=True)
class Signal:
    """One out-of-control signal: 0-based point ``index``, the ``rule``, and words."""

    index: int
    rule: Rule
    message: str


@dataclass(frozen=True)
class ChartResult:
    """Individuals and moving-range chart.

    Attributes
    ----------
    values : ndarray
        The results, in time order.
    moving_ranges : ndarray
        |x_i − x_{i−1}|; NaN at position 0.
    baseline_size : int
        Number of leading results the limits were estimated from.
    center, sigma : float
        Centre line and σ̂ used for the limits and the zones of the run rules.
    mr_bar : float
        Average moving range of the baseline (d₂·σ when σ was given).
    i_ucl, i_lcl : float
        Individuals-chart limits, centre ± 3σ.
    mr_ucl : float
        Moving-range upper limit, D₄·MR̄.
    """

    values: np.ndarray
    moving_ranges: np.ndarray
    baseline_size: int
    center: float
    sigma: float
    mr_bar: float
    i_ucl: float
    i_lcl: float
    mr_ucl: float


@dataclass(frozen=True)
class EWMAResult:
    """EWMA chart: statistic ``z`` and per-point limits ``ucl``/``lcl``."""

    values: np.ndarray
    z: np.ndarray
    ucl: np.ndarray
    lcl: np.ndarray
    center: float
    sigma: float
    lam: float
    L: float
    exact: bool


# --------------------------------------------------------------------------- input

def _as_values(values) -> np.ndarray:
    try:
        x = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise InputError("QC results must be numbers", field="values") from None
    if x.ndim != 1:
        raise InputError(f"QC results must be a 1-D sequence, got shape {x.shape}", field="values")
    if x.size == 0:
        raise InputError("no QC results given", field="values")
    bad = np.flatnonzero(~np.isfinite(x))
    if bad.size:
        raise InputError(f"QC result at position {bad[0]} is not a finite number ({x[bad[0]]})",
                         field=f"values[{bad[0]}]")
    return x


def _baseline_size(n: int, baseline: int | None) -> int:
    if baseline is None:
        return n
    if isinstance(baseline, bool) or not isinstance(baseline, (int, np.integer)) or baseline < 1:
        raise InputError(f"baseline must be a positive whole number of results, got {baseline!r}",
                         field="baseline")
    return min(int(baseline), n)


def _positive(value: float, name: str) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be a positive finite number, got {value}", field=name)
    return value


def _moving_ranges(x: np.ndarray) -> np.ndarray:
    mr = np.full(x.shape, np.nan)
    mr[1:] = np.abs(np.diff(x))
    return mr


def _center_sigma(x: np.ndarray, m: int, center: float | None,
                  sigma: float | None) -> tuple[float, float, float]:
    """Centre, σ̂ and MR̄ from the first ``m`` results unless given."""
    if center is None:
        center = float(np.mean(x[:m]))
    elif not math.isfinite(float(center)):
        raise InputError(f"center must be a finite number, got {center}", field="center")
    if sigma is None:
        if m < 2:
            raise InputError("need at least 2 baseline results to estimate sigma from moving "
                             f"ranges, got {m}; give sigma or more results", field="baseline")
        mr_bar = float(np.mean(np.abs(np.diff(x[:m]))))
        if mr_bar == 0.0:
            raise InputError(f"the {m} baseline results do not vary (average moving range 0); "
                             "cannot set control limits", field="values")
        sigma = mr_bar / D2
    else:
        sigma = _positive(sigma, "sigma")
        mr_bar = D2 * sigma
    return float(center), float(sigma), mr_bar


# --------------------------------------------------------------------------- charts

def individuals_mr_chart(values, *, center: float | None = None, sigma: float | None = None,
                         baseline: int | None = DEFAULT_BASELINE) -> ChartResult:
    """Individuals and moving-range (span 2) chart with limits from a baseline.

    Parameters
    ----------
    values : array_like of float
        QC results in time order.
    center : float, optional
        Known centre line; default the baseline mean.
    sigma : float, optional
        Known σ; default MR̄/d₂ of the baseline.
    baseline : int or None
        Number of leading results used to estimate the limits (default 20);
        all results if there are fewer, or if None.

    Returns
    -------
    ChartResult

    References
    ----------
    NIST/SEMATECH e-Handbook of Statistical Methods, §6.3.2.2 (individuals
    control charts); ASTM D6299.
    """
    x = _as_values(values)
    m = _baseline_size(x.size, baseline)
    center, sigma, mr_bar = _center_sigma(x, m, center, sigma)
    return ChartResult(values=x, moving_ranges=_moving_ranges(x), baseline_size=m,
                       center=center, sigma=sigma, mr_bar=mr_bar,
                       i_ucl=center + 3.0 * sigma, i_lcl=center - 3.0 * sigma,
                       mr_ucl=D4 * mr_bar)


def ewma_chart(values, *, lam: float = DEFAULT_LAMBDA, center: float | None = None,
               sigma: float | None = None, exact: bool = True, L: float = 3.0,
               baseline: int | None = DEFAULT_BASELINE) -> EWMAResult:
    """Exponentially weighted moving average chart.

    Parameters
    ----------
    values : array_like of float
        QC results in time order.
    lam : float
        Weight λ of the newest result, 0 < λ ≤ 1 (default 0.4, from memory of ASTM D6299).
    center, sigma : float, optional
        Target and σ of single results; default from the baseline as in
        :func:`individuals_mr_chart`.
    exact : bool
        Use the exact, widening limits (default) rather than the asymptotic ones.
    L : float
        Width of the limits in standard deviations of z (default 3).
    baseline : int or None
        As in :func:`individuals_mr_chart`.

    Returns
    -------
    EWMAResult

    References
    ----------
    Roberts, Technometrics 1:239 (1959); NIST/SEMATECH e-Handbook §6.3.2.4.
    """
    x = _as_values(values)
    lam = float(lam)
    if not (0.0 < lam <= 1.0):
        raise InputError(f"lam must be in (0, 1], got {lam}", field="lam")
    L = _positive(L, "L")
    m = _baseline_size(x.size, baseline)
    center, sigma, _ = _center_sigma(x, m, center, sigma)
    z = np.empty_like(x)
    previous = center
    for t, value in enumerate(x):
        previous = lam * value + (1.0 - lam) * previous
        z[t] = previous
    t = np.arange(1, x.size + 1)
    if exact:
        factor = lam / (2.0 - lam) * (1.0 - (1.0 - lam) ** (2 * t))
    else:
        factor = np.full(x.shape, lam / (2.0 - lam))
    half_width = L * sigma * np.sqrt(factor)
    return EWMAResult(values=x, z=z, ucl=center + half_width, lcl=center - half_width,
                      center=center, sigma=sigma, lam=lam, L=L, exact=bool(exact))


# --------------------------------------------------------------------------- rules

def _side(s: int) -> str:
    return "above" if s > 0 else "below"


def _zone_rule(dev: np.ndarray, k: float, window: int, need: int, rule: Rule,
               sigma: float) -> list[Signal]:
    """``need`` of ``window`` consecutive points beyond k·σ on one side.

    Reported at the newest point of each window, when that point is beyond the
    zone itself; windows at the start of the chart are the points so far (see
    the module notes for why this finds every pattern exactly once per point).
    """
    out = []
    for t in range(need - 1, dev.size):
        start = max(0, t - window + 1)
        for s in (1, -1):
            beyond = s * dev[start:t + 1] > k * sigma
            if beyond[-1] and beyond.sum() >= need:
                out.append(Signal(t, rule, f"{int(beyond.sum())} of the last {beyond.size} "
                                           f"results are more than {k:g}σ {_side(s)} the "
                                           f"centre line (rule: {need} of {window}; "
                                           f"σ = {sigma:.4g})"))
    return out


def _run_rule(dev: np.ndarray, run_length: int) -> list[Signal]:
    out = []
    run, side = 0, 0
    for t, d in enumerate(dev):
        s = int(np.sign(d))
        run = run + 1 if (s != 0 and s == side) else (1 if s != 0 else 0)
        side = s
        if run >= run_length:
            out.append(Signal(t, Rule.RUN_ON_ONE_SIDE,
                              f"{run} results in a row {_side(s)} the centre line "
                              f"(rule: {run_length})"))
    return out


def evaluate(values, *, center: float | None = None, sigma: float | None = None,
             baseline: int | None = DEFAULT_BASELINE, run_length: int = DEFAULT_RUN_LENGTH,
             lam: float = DEFAULT_LAMBDA, exact: bool = True) -> list[Signal]:
    """All signals of the run rules, the EWMA and the moving-range chart.

    Parameters are those of :func:`individuals_mr_chart` and :func:`ewma_chart`;
    ``run_length`` is the run rule's N (default 9, common practice).

    Returns
    -------
    list of Signal
        Sorted by index, then by rule in :class:`Rule` order.
    """
    return qc_report(values, center=center, sigma=sigma, baseline=baseline,
                     run_length=run_length, lam=lam, exact=exact).signals


@dataclass(frozen=True)
class QCReport:
    """Both charts and their signals, as one object for services and plots."""

    individuals: ChartResult
    ewma: EWMAResult
    signals: list[Signal]
    run_length: int

    def plot_data(self) -> dict:
        """JSON-friendly series for plotting (NaN becomes None)."""
        ind, ew = self.individuals, self.ewma
        clean = plain_json
        return {
            "index": list(range(ind.values.size)),
            "value": clean(ind.values),
            "baseline_size": ind.baseline_size,
            "center": ind.center,
            "sigma": ind.sigma,
            "i_ucl": ind.i_ucl,
            "i_lcl": ind.i_lcl,
            "moving_range": clean(ind.moving_ranges),
            "mr_bar": ind.mr_bar,
            "mr_ucl": ind.mr_ucl,
            "ewma": clean(ew.z),
            "ewma_ucl": clean(ew.ucl),
            "ewma_lcl": clean(ew.lcl),
            "lam": ew.lam,
            "run_length": self.run_length,
            "signals": [{"index": s.index, "rule": s.rule.value,
                         "name": rule_name(s.rule, self.run_length),
                         "chart": RULE_CHART[s.rule], "message": s.message}
                        for s in self.signals],
        }


def qc_report(values, *, center: float | None = None, sigma: float | None = None,
              baseline: int | None = DEFAULT_BASELINE, run_length: int = DEFAULT_RUN_LENGTH,
              lam: float = DEFAULT_LAMBDA, exact: bool = True) -> QCReport:
    """Charts plus signals; see :func:`evaluate` for the parameters."""
    if isinstance(run_length, bool) or not isinstance(run_length, (int, np.integer)) \
            or run_length < 2:
        raise InputError(f"run_length must be a whole number ≥ 2, got {run_length!r}",
                         field="run_length")
    chart = individuals_mr_chart(values, center=center, sigma=sigma, baseline=baseline)
    ew = ewma_chart(chart.values, lam=lam, center=chart.center, sigma=chart.sigma,
                    exact=exact, baseline=baseline)
    x, c, sd = chart.values, chart.center, chart.sigma
    dev = x - c
    signals: list[Signal] = []
    for t in np.flatnonzero(np.abs(dev) > 3.0 * sd):
        s = 1 if dev[t] > 0 else -1
        limit = chart.i_ucl if s > 0 else chart.i_lcl
        signals.append(Signal(int(t), Rule.BEYOND_3_SIGMA,
                              f"result {x[t]:.6g} is more than 3σ {_side(s)} the centre line "
                              f"(limit {limit:.6g})"))
    signals += _zone_rule(dev, 2.0, 3, 2, Rule.TWO_OF_THREE_BEYOND_2_SIGMA, sd)
    signals += _zone_rule(dev, 1.0, 5, 4, Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA, sd)
    signals += _run_rule(dev, int(run_length))
    for t in np.flatnonzero((ew.z > ew.ucl) | (ew.z < ew.lcl)):
        s = 1 if ew.z[t] > ew.ucl[t] else -1
        limit = ew.ucl[t] if s > 0 else ew.lcl[t]
        signals.append(Signal(int(t), Rule.EWMA_BEYOND_LIMITS,
                              f"EWMA {ew.z[t]:.6g} is {_side(s)} its limit {limit:.6g}"))
    mr = chart.moving_ranges
    for t in np.flatnonzero(np.nan_to_num(mr, nan=-1.0) > chart.mr_ucl):
        signals.append(Signal(int(t), Rule.MR_ABOVE_UCL,
                              f"moving range {mr[t]:.6g} is above its limit {chart.mr_ucl:.6g}"))
    order = {rule: i for i, rule in enumerate(Rule)}
    signals.sort(key=lambda s: (s.index, order[s.rule]))
    return QCReport(individuals=chart, ewma=ew, signals=signals, run_length=int(run_length))
