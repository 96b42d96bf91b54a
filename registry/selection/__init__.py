"""Calibration-set design: which samples are worth sending for reference testing.

- :func:`kennard_stone` — maximin coverage (Kennard & Stone 1969), augment mode.
- :func:`d_optimal` — Fedorov exchange maximising det(ZᵀZ), fixed rows kept.
- :func:`duplex` — calibration/validation split (Snee 1977).
- :class:`SelectionSpace`, :func:`selection_scores` — shared PCA score space.
- :func:`fit_to_budget`, :func:`budget_positions`, :func:`pick_rationale`,
  :func:`coverage_summary` — cutting ranked picks to a budget and explaining them.
- :func:`compare_selection_strategies` — RMSEP of strategies for a given model.
- :func:`spxy` — Kennard–Stone on joint spectra/value distances (Galvão et al. 2005).
- :class:`SelectionProblem` — an existing set and a pool, ranked by any of
  :data:`METHODS` (random, KS variants, D-optimal, outside-coverage first, SPXY,
  bootstrap spread).
- :func:`recommend_method`, :func:`expected_benefit` — the method the measured
  evidence supports for a situation, and what the picks are expected to buy.
- :func:`forecast_error`, :func:`learning_curve`, :func:`fit_power_law` — RMSEP
  against the number of further reference tests, with bands.
"""

from registry.selection.budget import (CoverageSummary, PickRationale, budget_positions,
                                       coverage_summary, fit_to_budget, pick_rationale)
from registry.selection.d_optimal import DOptimalResult, d_optimal, design_matrix
from registry.selection.duplex import duplex
from registry.selection.evaluation import compare_selection_strategies, rmsep
from registry.selection.forecast import (ErrorForecast, LearningCurve, PowerLaw, fit_power_law,
                                         forecast_error, learning_curve)
from registry.selection.kennard_stone import MAX_EXACT_PAIR_ROWS, kennard_stone
from registry.selection.recommend import Recommendation, expected_benefit, recommend_method
from registry.selection.space import SelectionSpace, selection_scores
from registry.selection.spxy import spxy
from registry.selection.strategies import METHODS, SelectionProblem

__all__ = [
    "CoverageSummary", "DOptimalResult", "ErrorForecast", "LearningCurve", "MAX_EXACT_PAIR_ROWS",
    "METHODS", "PickRationale", "PowerLaw", "Recommendation", "SelectionProblem",
    "SelectionSpace", "budget_positions", "compare_selection_strategies", "coverage_summary",
    "d_optimal", "design_matrix", "duplex", "expected_benefit", "fit_power_law",
    "fit_to_budget", "forecast_error", "kennard_stone", "learning_curve", "pick_rationale",
    "recommend_method", "rmsep", "selection_scores", "spxy",
]
