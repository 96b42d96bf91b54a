"""Calibration-set design: which samples are worth sending for reference testing.

- :func:`kennard_stone` — maximin coverage (Kennard & Stone 1969), augment mode.
- :func:`d_optimal` — Fedorov exchange maximising det(ZᵀZ), fixed rows kept.
- :func:`duplex` — calibration/validation split (Snee 1977).
- :class:`SelectionSpace`, :func:`selection_scores` — shared PCA score space.
- :func:`fit_to_budget`, :func:`budget_positions`, :func:`pick_rationale`,
  :func:`coverage_summary` — cutting ranked picks to a budget and explaining them.
- :func:`compare_selection_strategies` — RMSEP of strategies for a given model.
"""

from registry.selection.budget import (CoverageSummary, PickRationale, budget_positions,
                                       coverage_summary, fit_to_budget, pick_rationale)
from registry.selection.d_optimal import DOptimalResult, d_optimal, design_matrix
from registry.selection.duplex import duplex
from registry.selection.evaluation import compare_selection_strategies, rmsep
from registry.selection.kennard_stone import MAX_EXACT_PAIR_ROWS, kennard_stone
from registry.selection.space import SelectionSpace, selection_scores

__all__ = [
    "CoverageSummary", "DOptimalResult", "MAX_EXACT_PAIR_ROWS", "PickRationale",
    "SelectionSpace", "budget_positions", "compare_selection_strategies", "coverage_summary",
    "d_optimal", "design_matrix", "duplex", "fit_to_budget", "kennard_stone", "pick_rationale",
    "rmsep", "selection_scores",
]
