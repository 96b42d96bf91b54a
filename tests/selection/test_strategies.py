"""Pool-ranking methods, each checked against the published rule it names: Kennard &
Stone (1969) taken literally, SPXY as in Galvão et al. (2005), and the prediction-time
checks of registry.chemometrics.ApplicabilityDomain (Jackson & Mudholkar 1979 Q limit,
Hotelling T², leverage, nearest neighbour) computed directly."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from registry.chemometrics import ApplicabilityDomain, PLSRegressor
from registry.errors import InputError
from registry.selection import SelectionSpace
from registry.selection.strategies import METHODS, NEEDS_MODEL, SPACE_FLAGS, SelectionProblem
from registry.services.models import DEFAULT_RECIPE
from registry.spectra.preprocessing import Recipe
from seed_demo.synthetic import (NEW_COMPONENT, REFERENCE_ANALYZER, blend_properties,
                                 generate_population, reference_noise, render_spectra)
from tests.selection._reference import kennard_stone_1969
from tests.selection.test_spxy import spxy_2005

N_EXISTING, N_POOL, A = 30, 40, 3


@pytest.fixture(scope="module")
def problem():
    """30 existing blends; a pool of 40, the last 12 holding the new component at 8 %."""
    rng = np.random.default_rng(0)
    pop = generate_population(N_EXISTING + N_POOL, grade="regular-E10", seed=3)
    v = pop.composition.to_numpy(copy=True)
    new_rows = np.arange(N_EXISTING + N_POOL - 12, N_EXISTING + N_POOL)
    v[new_rows] *= 0.92
    v[new_rows, list(pop.composition.columns).index(NEW_COMPONENT)] = 0.08
    comp = pd.DataFrame(v, columns=pop.composition.columns)
    X = Recipe.from_json(DEFAULT_RECIPE).build(pop.axis).fit_transform(
        render_spectra(comp, REFERENCE_ANALYZER, rng, axis=pop.axis))
    y = reference_noise("RON", blend_properties(comp, "gasoline")["RON"].to_numpy(), rng)
    return SelectionProblem(X[N_EXISTING:], X[:N_EXISTING], y[:N_EXISTING], n_components=A,
                            random_state=1), X, y


def test_outside_first_takes_the_flagged_spectra_first(problem):
    prob, X, y = problem
    model = PLSRegressor(n_components=A).fit(X[:N_EXISTING], y[:N_EXISTING])
    checks = ApplicabilityDomain(confidence=0.99).fit(X[:N_EXISTING], model, y[:N_EXISTING])
    res = checks.assess(X[N_EXISTING:], model.predict(X[N_EXISTING:]))
    flagged = set(np.flatnonzero(np.any([res.flags[f] for f in SPACE_FLAGS], axis=0)).tolist())
    assert 0 < len(flagged) < N_POOL
    assert set(range(N_POOL - 12, N_POOL)) <= flagged  # the new component is seen
    picks = prob.rank("outside-first", len(flagged) + 5)
    assert set(picks[:len(flagged)].tolist()) == flagged
    assert not set(picks[len(flagged):].tolist()) & flagged
    assert prob.outside_share == pytest.approx(len(flagged) / N_POOL)


def test_ks_augment_is_kennard_stone_1969_in_the_shared_pca_space(problem):
    prob, X, _ = problem
    space = SelectionSpace(explained_variance=0.99).fit(X)
    T = space.transform(X) / np.sqrt(space.eigenvalues_)  # Mahalanobis on scores
    expected = kennard_stone_1969(T, 15, already_selected=list(range(N_EXISTING)))
    assert prob.rank("ks-augment", 15).tolist() == [i - N_EXISTING for i in expected]


def test_ks_spectrum_is_kennard_stone_1969_on_the_pool(problem):
    prob, X, _ = problem
    assert prob.rank("ks-spectrum", 10).tolist() == kennard_stone_1969(X[N_EXISTING:], 10)


def test_spxy_uses_known_values_and_the_models_predictions(problem):
    prob, X, y = problem
    model = PLSRegressor(n_components=A).fit(X[:N_EXISTING], y[:N_EXISTING])
    values = np.concatenate([y[:N_EXISTING], model.predict(X[N_EXISTING:])])
    expected = spxy_2005(X, values, 12, already_selected=list(range(N_EXISTING)))
    assert prob.rank("spxy", 12).tolist() == [i - N_EXISTING for i in expected]


@pytest.mark.parametrize("method", METHODS)
def test_every_method_returns_distinct_pool_rows(problem, method):
    prob, _, _ = problem
    picks = prob.rank(method, 20)
    assert picks.size == 20 and np.unique(picks).size == 20
    assert picks.min() >= 0 and picks.max() < N_POOL


@pytest.mark.parametrize("method", NEEDS_MODEL)
def test_value_methods_need_an_existing_calibration(problem, method):
    _, X, _ = problem
    first = SelectionProblem(X[N_EXISTING:])
    with pytest.raises(InputError) as err:
        first.rank(method, 5)
    assert err.value.field == "method"
    assert first.outside_share == 0.0


def test_unknown_method_and_too_many_picks_are_refused(problem):
    prob, _, _ = problem
    with pytest.raises(InputError):
        prob.rank("simplex", 3)
    with pytest.raises(InputError) as err:
        prob.rank("random", N_POOL + 1)
    assert err.value.field == "k"
