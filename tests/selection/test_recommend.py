"""The recommended selection method follows the measured evidence (EVIDENCE, from
tests/benchmarks/bench_selection_scenarios.py), and the expected benefit is read from
the error forecast."""

from __future__ import annotations

import math

import numpy as np
import pytest

from registry.errors import InputError
from registry.selection.forecast import forecast_error
from registry.selection.recommend import (EVIDENCE, MIN_EXISTING_FOR_VALUES,
                                          OUTSIDE_SHARE_MOVED, expected_benefit,
                                          recommend_method)
from registry.selection.strategies import METHODS

MOVED = ("new component", "season VP", "season T50", "fermentation")


def mean_ratio(method, scenarios):
    """Mean tests ratio of ``method`` over scenarios and both budgets (inf counts as 1.5)."""
    values = [min(EVIDENCE[s][method]["budgets"][N][0], 1.5)
              for s in scenarios for N in EVIDENCE[s][method]["budgets"]]
    return float(np.mean(values))


def test_first_calibration_gets_kennard_stone():
    for known in (True, False):
        rec = recommend_method(0.0, 0, references_known=known)
        assert rec.method == "ks-augment" and rec.scenario == "new grade"
    assert recommend_method(0.8, 60, references_known=False).method == "ks-augment"


def test_moved_production_with_results_gets_spxy():
    rec = recommend_method(0.6, 50, references_known=True)
    assert rec.method == "spxy"
    assert "60%" in rec.reason and "\n" not in rec.reason
    assert recommend_method(OUTSIDE_SHARE_MOVED, MIN_EXISTING_FOR_VALUES,
                            references_known=True).method == "spxy"


def test_unchanged_production_and_few_results_get_ks_augment():
    below = np.nextafter(OUTSIDE_SHARE_MOVED, 0)
    assert recommend_method(below, 50, references_known=True).method == "ks-augment"
    assert recommend_method(0.9, MIN_EXISTING_FOR_VALUES - 1,
                            references_known=True).method == "ks-augment"


def test_every_recommendation_is_a_known_method_with_evidence():
    for share in (0.0, 0.05, 0.5, 1.0):
        for n in (0, 5, 50):
            for known in (True, False):
                rec = recommend_method(share, n, references_known=known)
                assert rec.method in METHODS
                assert rec.evidence and "not measured" not in rec.evidence


def test_rule_agrees_with_the_stored_evidence():
    # Moved production: SPXY saved more tests on average than KS augment.
    assert mean_ratio("spxy", MOVED) < mean_ratio("ks-augment", MOVED)
    # Unchanged production and a first calibration: KS augment within noise of random
    # (the 95 % interval of its ratio includes 1 at some budget, or lies below 1).
    for scenario in ("unchanged", "new grade"):
        for ratio, low, high in EVIDENCE[scenario]["ks-augment"]["budgets"].values():
            assert low <= 1.0


def test_bad_situation_is_refused():
    with pytest.raises(InputError) as err:
        recommend_method(1.2, 10, references_known=True)
    assert err.value.field == "outside_share"
    with pytest.raises(InputError) as err:
        recommend_method(0.2, -1, references_known=True)
    assert err.value.field == "n_existing"


def test_expected_benefit_reads_the_forecast():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(50, 5))
    y = X @ rng.normal(size=5) + 0.2 * rng.standard_normal(50)
    fc = forecast_error(X, y, np.zeros((30, 5)), n_components=5, sigma_r=0.2, n_boot=30,
                        random_state=0)
    out = expected_benefit(fc, 10)
    assert out["now"]["n"] == 50 and out["after"] == fc.at(10)
    assert out["after"]["low"] <= out["after"]["rmsep"] <= out["after"]["high"]
    assert out["caution"] == ""
    assert "outside" in expected_benefit(fc, 7, outside_share=0.5)["caution"]
    assert expected_benefit(fc, 7)["after"]["added"] == 7
    assert math.isfinite(out["now"]["rmsep"])
