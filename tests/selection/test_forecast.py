"""Forecasting error against budget: the curve fit (scipy.optimize.curve_fit as the
reference), the σ_r floor (ISO 5725-6 repeatability, common practice that it adds to
every validation error), the learning curve against least-squares theory, and the
honesty of the bands on generated histories."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import curve_fit

from registry.chemometrics import PLSRegressor
from registry.errors import InputError
from registry.selection.evaluation import rmsep
from registry.selection.forecast import PowerLaw, fit_power_law, forecast_error, learning_curve
from registry.services.models import DEFAULT_RECIPE
from registry.spectra.preprocessing import Recipe
from seed_demo.synthetic import generate_population, reference_noise, reference_sigma

SIZES = np.array([10, 14, 20, 28, 40, 56, 80], dtype=float)
WIDE = np.geomspace(10, 640, 9)


def law(m, a, b, c, floor_var):
    return floor_var + c + a * m ** (-b)


@pytest.mark.parametrize("seed", range(3))
def test_fit_recovers_a_generated_power_law_like_curve_fit(seed):
    rng = np.random.default_rng(seed)
    truth = dict(a=3.0, b=0.9, c=0.02)
    floor_var = 0.01
    mse = law(WIDE, **truth, floor_var=floor_var) * (1 + 0.01 * rng.standard_normal(WIDE.size))
    mine = fit_power_law(WIDE, mse, floor_var=floor_var)
    # Reference: scipy.optimize.curve_fit (trust-region reflective, same bounds a, c >= 0).
    ref, _ = curve_fit(lambda m, a, b, c: law(m, a, b, c, floor_var), WIDE, mse,
                       p0=(1.0, 1.0, 0.0), bounds=([0, 0.05, 0], [np.inf, 4.0, np.inf]))
    np.testing.assert_allclose([mine.a, mine.b, mine.c], ref, rtol=0.02, atol=2e-4)
    # and both near the generating values (1 % noise on 9 sizes from 10 to 640)
    assert mine.a == pytest.approx(truth["a"], rel=0.2)
    assert mine.b == pytest.approx(truth["b"], abs=0.1)
    assert mine.c == pytest.approx(truth["c"], abs=0.003)
    np.testing.assert_allclose(mine.mse(WIDE), law(WIDE, **truth, floor_var=floor_var),
                               rtol=0.02)


def test_weighted_fit_matches_curve_fit_with_sigma():
    rng = np.random.default_rng(11)
    mse = law(SIZES, 1.5, 0.6, 0.05, 0.0) * (1 + 0.03 * rng.standard_normal(SIZES.size))
    sd = 0.01 * mse * np.linspace(1, 3, SIZES.size)
    mine = fit_power_law(SIZES, mse, weights=1 / sd**2)
    ref, _ = curve_fit(lambda m, a, b, c: law(m, a, b, c, 0.0), SIZES, mse, sigma=sd,
                       p0=(1.0, 1.0, 0.0), bounds=([0, 0.05, 0], [np.inf, 4.0, np.inf]))
    np.testing.assert_allclose(mine.mse(SIZES), law(SIZES, *ref, 0.0), rtol=1e-3)


def test_floor_is_sigma_r_when_errors_fall_below_it():
    # Common practice: the reference method's repeatability σ_r adds to every validation
    # error, so no fit may promise less, even if the data dip below it by chance.
    sigma_r = 0.2
    mse = 0.5 * sigma_r**2 + 2.0 * SIZES ** (-1.0)
    fitted = fit_power_law(SIZES, mse, floor_var=sigma_r**2)
    assert fitted.c == 0.0
    assert fitted.floor == pytest.approx(sigma_r)
    assert np.all(fitted.rmse(np.array([1e3, 1e6])) >= sigma_r)
    assert math.isinf(fitted.size_for(0.99 * sigma_r))


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(1e-4, 10.0), min_size=5, max_size=5),
       st.one_of(st.just(0.0), st.floats(1e-6, 1.0)))
def test_floor_never_below_sigma_r(values, sigma_r):
    fitted = fit_power_law(SIZES[:5], values, floor_var=sigma_r**2)
    assert fitted.floor >= sigma_r
    assert fitted.a >= 0 and fitted.c >= 0


def test_size_for_inverts_the_law():
    p = PowerLaw(a=2.0, b=0.8, c=0.01, floor_var=0.04)
    m = p.size_for(0.3)
    assert p.rmse(m) == pytest.approx(0.3)


def test_fit_refuses_too_few_sizes():
    with pytest.raises(InputError) as err:
        fit_power_law([10, 10, 20], [1.0, 1.1, 0.9])
    assert err.value.field == "sizes"


def ols_expected_mse(m, p, sigma=1.0):
    """E[(ŷ − y)²] of least squares with intercept, Gaussian random design, m samples:
    σ²(1 + 1/m)(m − 2)/(m − p − 2), from E[S⁻¹] = Σ⁻¹/(m − p − 2) for the Wishart S
    of the centred design (inverse-Wishart mean; from memory)."""
    return sigma**2 * (1 + 1 / m) * (m - 2) / (m - p - 2)


def test_learning_curve_matches_least_squares_theory():
    # PLS with as many components as variables is least squares.
    rng = np.random.default_rng(5)
    p, n = 4, 150
    X = rng.normal(size=(n, p))
    y = X @ np.array([1.0, -2.0, 0.5, 1.5]) + rng.standard_normal(n)
    curve = learning_curve(X, y, p, sizes=[10, 15, 25, 50, 100], n_repeats=12,
                           random_state=1)
    expected = ols_expected_mse(curve.sizes.astype(float), p)
    np.testing.assert_allclose(curve.mean_mse, expected, rtol=0.15)


def _history(seed, prop="RON", n_cal=40):
    """A generated history: calibration, pool and future test set of one production."""
    pop = generate_population(n_cal + 200, grade="regular-E10", seed=seed)
    X = Recipe.from_json(DEFAULT_RECIPE).build(pop.axis).fit_transform(pop.spectra)
    y_true = pop.properties[prop].to_numpy()
    y = reference_noise(prop, y_true, np.random.default_rng(seed))
    sigma_r = float(reference_sigma(prop, y_true.mean()))
    return X, y, np.arange(n_cal), np.arange(n_cal, n_cal + 60), np.arange(n_cal + 60,
                                                                            n_cal + 200), sigma_r


def test_bands_cover_realised_error_on_generated_histories():
    # Honesty check: the realised RMSEP (random picks added, scored on a future test set
    # against reference values) lies in the 80 % band in at least 70 % of the forecasts.
    inside = total = 0
    for seed in range(4):
        X, y, cal, pool, test, sigma_r = _history(seed)
        fc = forecast_error(X[cal], y[cal], X[pool], sigma_r=sigma_r, steps=(10, 30, 60),
                            n_validation=test.size, n_repeats=6, n_boot=60,
                            random_state=seed)
        order = np.random.default_rng(seed).permutation(pool)
        n_comp = fc.n_components
        for row in fc.rows:
            rows = np.concatenate([cal, order[:row["added"]]])
            model = PLSRegressor(n_components=n_comp).fit(X[rows], y[rows])
            realised = rmsep(y[test], model.predict(X[test]))
            inside += row["low"] <= realised <= row["high"]
            total += 1
    assert inside / total >= 0.7


def test_output_shape_and_target():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(60, 6))
    y = X @ rng.normal(size=6) + 0.3 * rng.standard_normal(60)
    fc = forecast_error(X, y, np.zeros((50, 6)), n_components=6, sigma_r=0.3, sigma_R=0.32,
                        cost_per_test=120.0, n_boot=50, random_state=0)
    out = fc.as_dict()
    assert set(out["now"]) >= {"rmsecv", "n", "rmsep", "low", "high"}
    assert out["now"]["n"] == 60
    assert [r["added"] for r in out["forecast"]] == [5, 10, 20, 40, 50]
    for r in out["forecast"]:
        assert r["cost"] == 120.0 * r["added"]
        assert r["low"] <= r["rmsep"] <= r["high"]
        assert r["rmsep"] >= 0.3  # never below σ_r
    to = out["to_reach"]
    if to is not None:
        assert to["target"] == 0.32 and to["cost"] == 120.0 * to["added"]
        assert fc.law.rmse(60 + to["added"]) <= 0.32 + 1e-12
        assert to["added"] == 0 or fc.law.rmse(60 + to["added"] - 1) > 0.32
    else:
        assert "floor" in out["to_reach_reason"] or "pool" in out["to_reach_reason"]
    below = forecast_error(X, y, None, n_components=6, sigma_r=0.3, target=0.29, n_boot=20,
                           random_state=0).as_dict()
    assert below["to_reach"] is None and "floor" in below["to_reach_reason"]
