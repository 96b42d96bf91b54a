"""Which selection method to use, given the lab's situation, and what it is expected to buy.

:func:`recommend_method` is a pure function of three facts the registry knows
before any test is ordered: the share of the candidate pool that fails a
prediction-time check of the current model, the size of the existing
calibration set, and whether its reference results are known. The rule follows
the measured evidence of ``tests/benchmarks/bench_selection_scenarios.py``
(synthetic fuel populations in three production changes plus an unchanged
production, and chemotools' fermentation data), summarised in
:data:`EVIDENCE`:

- nothing to build on (no existing set with results): Kennard–Stone in the
  pool's PCA space. On a first calibration from a mixed pool no method beat
  random picks; KS was never worse beyond noise and spreads the picks.
- production has moved (a meaningful share of the pool outside the model's
  space) and results are known: SPXY on spectra and the current model's
  predicted values. Across the moved-production scenarios it saved the most
  tests on average and was never worse than random.
- production looks like the calibration: KS augmenting the existing set. On
  such data no method beat random picks; KS was as good within noise.

:func:`expected_benefit` reads the expected RMSEP now and after the picks, with
its band, from an :class:`registry.selection.forecast.ErrorForecast`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from registry.errors import InputError

#: Share of the pool failing a prediction-time check above which production is taken
#: to have moved. Four checks at 99 % flag a few per cent of in-space spectra by
#: chance; 10 % is clearly more than chance (a choice).
OUTSIDE_SHARE_MOVED = 0.10
#: Fewest existing results from which the current model's predictions are trusted to
#: steer a y-aware method (a choice: a PLS model of a few components on fewer
#: samples predicts new spectra too poorly).
MIN_EXISTING_FOR_VALUES = 10

#: Tests each method needs to reach the RMSEP that random picks reach with N tests, as
#: a ratio to N: (ratio, low, high) at the two budgets, 95 % bootstrap intervals over
#: populations. Measured by tests/benchmarks/bench_selection_scenarios.py (seeded);
#: that benchmark prints these numbers again and says when they are out of date.
#: inf = not reached within 1.5·N.
EVIDENCE: dict[str, dict] = {
    "new component": {
        "ks-augment": {"populations": 20, "budgets": {
            20: (0.13, 0.06, 0.31),
            40: (0.5, 0.27, 0.81),
        }},
        "spxy": {"populations": 20, "budgets": {
            20: (0.14, 0.05, 0.35),
            40: (0.51, 0.38, 0.7),
        }},
    },
    "unchanged": {
        "ks-augment": {"populations": 10, "budgets": {
            20: (1.39, 0.77, 2.18),
            40: (1.09, 0.68, math.inf),
        }},
        "spxy": {"populations": 10, "budgets": {
            20: (1.38, 0.74, 1.63),
            40: (1.2, 0.8, 1.46),
        }},
    },
    "new grade": {
        "ks-augment": {"populations": 10, "budgets": {
            20: (1.01, 0.87, 1.09),
            40: (0.95, 0.65, math.inf),
        }},
    },
    "season VP": {
        "ks-augment": {"populations": 10, "budgets": {
            20: (1.74, 0.4, 2.37),
            40: (1.34, 0.89, math.inf),
        }},
        "spxy": {"populations": 10, "budgets": {
            20: (0.41, 0.33, 0.79),
            40: (0.74, 0.42, 0.91),
        }},
    },
    "season T50": {
        "ks-augment": {"populations": 10, "budgets": {
            20: (0.31, 0.16, 0.44),
            40: (0.7, 0.22, 1.06),
        }},
        "spxy": {"populations": 10, "budgets": {
            20: (0.14, 0.09, 0.34),
            40: (0.53, 0.12, 0.68),
        }},
    },
    "fermentation": {
        "ks-augment": {"populations": 20, "budgets": {
            4: (0.7, 0.55, 0.75),
            8: (0.37, 0.34, 0.51),
        }},
        "spxy": {"populations": 20, "budgets": {
            4: (0.53, 0.39, 0.81),
            8: (0.45, 0.34, 0.6),
        }},
    },
}


@dataclass(frozen=True)
class Recommendation:
    """A selection method for a situation, with the one-line reason and its evidence.

    Attributes
    ----------
    method : str
        A name from :data:`registry.selection.strategies.METHODS`.
    reason : str
        One line for the lab manager.
    scenario : str
        The :data:`EVIDENCE` entry (benchmark scenario) behind the choice.
    evidence : str
        The measured figures, as text.
    """

    method: str
    reason: str
    scenario: str
    evidence: str


def _saved(scenario: str, method: str) -> str:
    """'saved 86 % (65–95 %) at N = 20, 49 % (31–62 %) at N = 40' from EVIDENCE."""
    row = EVIDENCE.get(scenario, {}).get(method)
    if row is None:
        return "not measured"
    parts = []
    for budget, (ratio, low, high) in row["budgets"].items():
        if math.isinf(ratio):
            parts.append(f"not reached within {1.5 * budget:.0f} tests at N = {budget}")
            continue
        hi_saved = "≤0" if math.isinf(high) else f"{100 * (1 - high):.0f}"
        parts.append(f"{100 * (1 - ratio):.0f} % ({hi_saved}–{100 * (1 - low):.0f} %) "
                     f"at N = {budget}")
    return (f"{scenario}: {method} saved " + ", ".join(parts)
            + f" of random's tests ({row['populations']} populations)")


def recommend_method(outside_share: float, n_existing: int, *,
                     references_known: bool) -> Recommendation:
    """The selection method the measured evidence supports for this situation.

    Parameters
    ----------
    outside_share : float
        Share (0–1) of the candidate pool that fails a prediction-time check of
        the current model (leverage, Hotelling T², Q residual, nearest
        neighbour); 0 when there is no model.
    n_existing : int
        Samples in the existing calibration set (0 for a first calibration).
    references_known : bool
        Whether the existing set's reference results are known.

    Returns
    -------
    Recommendation
    """
    share = float(outside_share)
    if not 0.0 <= share <= 1.0:
        raise InputError(f"outside_share must be between 0 and 1, got {outside_share!r}",
                         field="outside_share")
    if isinstance(n_existing, bool) or int(n_existing) != n_existing or n_existing < 0:
        raise InputError(f"n_existing must be a whole number >= 0, got {n_existing!r}",
                         field="n_existing")
    if n_existing == 0 or not references_known:
        return Recommendation(
            "ks-augment",
            ("nothing to build on yet" if n_existing == 0 else
             f"{n_existing} calibration samples but no model predicting the pool yet")
            + ": Kennard–Stone spreads the picks over the spectral space (no method beat "
            "random picks here, KS was never worse)",
            "new grade", _saved("new grade", "ks-augment"))
    if n_existing < MIN_EXISTING_FOR_VALUES:
        return Recommendation(
            "ks-augment",
            f"only {n_existing} reference results: too few to predict the pool, so "
            "Kennard–Stone fills what the calibration set lacks",
            "new component", _saved("new component", "ks-augment"))
    if share >= OUTSIDE_SHARE_MOVED:
        return Recommendation(
            "spxy",
            f"{share:.0%} of the pool is outside the model's space: SPXY picks where "
            "spectra and predicted values differ most from the calibration set",
            "new component", "; ".join(_saved(s, "spxy") for s in EVIDENCE
                                       if "spxy" in EVIDENCE[s]))
    return Recommendation(
        "ks-augment",
        f"only {share:.0%} of the pool is outside the model's space: no method beat random "
        "picks on such data; Kennard–Stone fills the largest gaps",
        "unchanged", _saved("unchanged", "ks-augment"))


def expected_benefit(forecast, added: int, *, outside_share: float = 0.0) -> dict:
    """Expected RMSEP now and after ``added`` more results, each with its band.

    Parameters
    ----------
    forecast : registry.selection.forecast.ErrorForecast
    added : int
        Picks to be tested.
    outside_share : float
        Share of the pool outside the model's space; above
        :data:`OUTSIDE_SHARE_MOVED` the answer carries a caution, because the
        forecast is the calibration population's own learning curve.

    Returns
    -------
    dict
        ``now`` {n, rmsecv, rmsep, low, high}, ``after`` {added, cost, rmsep, low,
        high}, ``band`` and ``caution`` (empty or one line).
    """
    if isinstance(added, bool) or int(added) != added or added < 0:
        raise InputError(f"added must be a whole number >= 0, got {added!r}", field="added")
    caution = ""
    if outside_share >= OUTSIDE_SHARE_MOVED:
        caution = (f"{outside_share:.0%} of the pool is outside the model's space: the error "
                   "on that production is larger than this forecast now, and the first "
                   "picks there help more than it says")
    return {"now": dict(forecast.now), "after": forecast.at(int(added)),
            "band": forecast.band, "caution": caution}
