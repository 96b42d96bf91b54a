"""Preprocessing recipes: validation, reference formulas, state round trips."""

import json
import warnings

import numpy as np
import pytest
from chemotools.derivative import SavitzkyGolay
from scipy.signal import savgol_filter
from sklearn.base import clone
from sklearn.exceptions import NotFittedError
from sklearn.utils.estimator_checks import check_estimator

from registry.errors import InputError
from registry.spectra.preprocessing import (MeanCenter, Recipe, RegionSelect, Segmentwise,
                                            SpectralPipeline)


def test_savgol_equals_scipy(fermentation):
    # source: scipy.signal.savgol_filter (reference implementation of
    # Savitzky & Golay, Anal. Chem. 36:1627, 1964)
    X, _, axis = fermentation
    for wl, po, d in [(15, 2, 1), (11, 3, 2), (7, 2, 0)]:
        pipe = Recipe.from_json([{"step": "savgol", "window_length": wl, "polyorder": po,
                                  "deriv": d}]).build(axis)
        expected = savgol_filter(X, wl, po, deriv=d, axis=1, mode="interp")
        np.testing.assert_allclose(pipe.fit_transform(X), expected, rtol=0, atol=1e-12)


def test_savgol_runs_per_segment_after_exclude(fermentation):
    # source: scipy.signal.savgol_filter applied to each contiguous part on its
    # own, so the filter never reaches across a removed band
    X, _, axis = fermentation
    cut = [1200.0, 1300.0]
    pipe = Recipe.from_json([{"step": "region", "exclude": [cut]},
                             {"step": "savgol", "window_length": 9, "polyorder": 2,
                              "deriv": 1}]).build(axis)
    out = pipe.fit_transform(X)
    left, right = axis < cut[0], axis > cut[1]
    expected = np.hstack([savgol_filter(X[:, left], 9, 2, deriv=1, axis=1),
                          savgol_filter(X[:, right], 9, 2, deriv=1, axis=1)])
    np.testing.assert_allclose(out, expected, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(pipe.axis_out_, axis[left | right])


def test_snv_textbook(fermentation):
    # source: Barnes, Dhanoa & Lister, Appl. Spectrosc. 43:772 (1989): each
    # spectrum centred on its own mean and divided by its own standard
    # deviation. The chemotools form divides by the population SD (ddof=0);
    # Barnes used n-1 (from memory): the two differ by the constant
    # sqrt((p-1)/p), which we check too.
    X, _, axis = fermentation
    out = Recipe.from_json([{"step": "snv"}]).build(axis).fit_transform(X)
    p = X.shape[1]
    mean = X.mean(axis=1, keepdims=True)
    sd_pop = np.sqrt(((X - mean) ** 2).sum(axis=1, keepdims=True) / p)
    np.testing.assert_allclose(out, (X - mean) / sd_pop, rtol=1e-12, atol=1e-12)
    sd_barnes = np.sqrt(((X - mean) ** 2).sum(axis=1, keepdims=True) / (p - 1))
    ratio = out / ((X - mean) / sd_barnes)
    np.testing.assert_allclose(ratio, np.sqrt(p / (p - 1)), rtol=1e-10)


def test_msc_textbook(fermentation, fermentation_online):
    # source: Geladi, MacDougall & Martens, Appl. Spectrosc. 39:491 (1985):
    # regress each spectrum on the calibration mean spectrum, x = a + b*m,
    # corrected = (x - a)/b; new spectra use the calibration reference
    X, _, axis = fermentation
    X_new = fermentation_online
    pipe = Recipe.from_json([{"step": "msc"}]).build(axis).fit(X)
    ref = X.mean(axis=0)
    for data in (X, X_new[:5]):
        b, a = np.polyfit(ref, data.T, 1)
        expected = (data - a[:, None]) / b[:, None]
        np.testing.assert_allclose(pipe.transform(data), expected, rtol=1e-9, atol=1e-9)


def test_region_keep_selects_axis_values(fermentation):
    # source: the definition of the step (inclusive ranges on axis values)
    X, _, axis = fermentation
    pipe = Recipe.from_json([{"step": "region", "keep": [[1500, 1000], [1700, 1650]]}]).build(axis)
    out = pipe.fit_transform(X)
    mask = ((axis >= 1000) & (axis <= 1500)) | ((axis >= 1650) & (axis <= 1700))
    np.testing.assert_array_equal(out, X[:, mask])
    np.testing.assert_array_equal(pipe.axis_out_, axis[mask])


def test_baselines_equal_numpy_fits(fermentation):
    # source: numpy.polyfit (degree-2 least squares over point index) and the
    # two-point line through the first and last points
    X, _, axis = fermentation
    out = Recipe.from_json([{"step": "baseline", "kind": "polynomial", "degree": 2}]
                           ).build(axis).fit_transform(X)
    idx = np.arange(X.shape[1])
    coef = np.polyfit(idx, X.T, 2)
    np.testing.assert_allclose(out, X - np.polyval(coef, idx[:, None]).T, atol=1e-9)
    lin = Recipe.from_json([{"step": "baseline", "kind": "linear"}]).build(axis).fit_transform(X)
    line = X[:, :1] + (X[:, -1:] - X[:, :1]) * idx / idx[-1]
    np.testing.assert_allclose(lin, X - line, atol=1e-12)


FULL_RECIPE = [
    {"step": "region", "keep": [[1800, 900]]},
    {"step": "region", "exclude": [[1300, 1250]]},
    {"step": "snv"},
    {"step": "msc"},
    {"step": "savgol", "window_length": 15, "polyorder": 2, "deriv": 1},
    {"step": "baseline", "kind": "polynomial", "degree": 1},
    {"step": "mean_center"},
]


def test_recipe_json_and_state_round_trip_is_bit_identical(fermentation, fermentation_online):
    # source: definition of the artifact contract (plain JSON + arrays restore
    # the fitted pipeline exactly)
    X, _, axis = fermentation
    X_new = fermentation_online
    recipe = Recipe.from_json(FULL_RECIPE)
    text = json.dumps(recipe.to_json())
    again = Recipe.from_json(json.loads(text))
    assert again == recipe
    fitted = recipe.build(axis).fit(X)
    refit = again.build(axis).fit(X)
    np.testing.assert_array_equal(fitted.transform(X_new), refit.transform(X_new))
    state = {k: v.copy() for k, v in fitted.state_arrays().items()}
    assert set(state) == {"step3.reference", "step6.mean"}
    restored = SpectralPipeline.from_state(json.loads(text), axis.copy(), state)
    np.testing.assert_array_equal(restored.transform(X_new), fitted.transform(X_new))


@pytest.mark.parametrize("recipe, field, words", [
    ([{"step": "savgol", "window_length": 10, "polyorder": 2}], "steps[0].window_length", "odd"),
    ([{"step": "snv"}, {"step": "savgol", "window_length": 5, "polyorder": 5}],
     "steps[1].polyorder", "window_length"),
    ([{"step": "savgol", "window_length": 7, "polyorder": 2, "deriv": 3}], "steps[0].deriv", "polyorder"),
    ([{"step": "savgol", "window_length": True, "polyorder": 2}], "steps[0].window_length", "integer"),
    ([{"step": "smooth"}], "steps[0].step", "unknown step"),
    ([{"step": "snv", "ddof": 1}], "steps[0].ddof", "unknown parameter"),
    ([{"step": "savgol", "polyorder": 2}], "steps[0].window_length", "missing"),
    ([{"step": "region"}], "steps[0].keep", "exactly one"),
    ([{"step": "region", "keep": [[1000, 1000]]}], "steps[0].keep[0]", "empty"),
    ([{"step": "region", "keep": [[1000]]}], "steps[0].keep[0]", "pair"),
    ([{"step": "baseline", "kind": "spline"}], "steps[0].kind", "linear"),
    ([{"step": "baseline", "kind": "linear", "degree": 2}], "steps[0].degree", "polynomial"),
    ([{"step": "baseline", "kind": "polynomial", "degree": 9}], "steps[0].degree", "between"),
    ("snv", "steps", "list"),
])
def test_invalid_recipe_parameters_name_step_and_field(recipe, field, words):
    # source: the recipe vocabulary documented in registry.spectra.preprocessing
    with pytest.raises(InputError) as info:
        Recipe.from_json(recipe)
    assert info.value.field == field
    assert words in str(info.value)


@pytest.mark.parametrize("recipe, field, words", [
    ([{"step": "region", "keep": [[5000, 4500]]}], "steps[0].keep[0]", "outside the axis"),
    ([{"step": "snv"}, {"step": "region", "exclude": [[300, 700]]}], "steps[1].exclude[0]",
     "outside the axis"),
    ([{"step": "region", "keep": [[1000.2, 1000.4]]}], "steps[0].keep[0]", "no axis point"),
    ([{"step": "region", "keep": [[1000, 1010]]},
      {"step": "savgol", "window_length": 21, "polyorder": 2}], "steps[1].window_length", "segment"),
])
def test_axis_dependent_errors_come_before_fitting(fermentation, recipe, field, words):
    # source: the axis rules documented in registry.spectra.preprocessing
    _, _, axis = fermentation
    with pytest.raises(InputError) as info:
        Recipe.from_json(recipe, axis=axis)
    assert info.value.field == field and words in str(info.value)
    with pytest.raises(InputError):
        Recipe.from_json(recipe).build(axis)


def test_axis_must_ascend():
    # source: module contract (ascending float64 axis)
    with pytest.raises(InputError, match="ascending"):
        Recipe.from_json([{"step": "snv"}]).build(np.array([3.0, 2.0, 1.0]))


def test_wrong_spectrum_width_is_reported(fermentation):
    X, _, axis = fermentation
    pipe = Recipe.from_json([{"step": "snv"}]).build(axis)
    with pytest.raises(InputError, match="points but the axis"):
        pipe.fit(X[:, :-1])


# ---------------------------------------------------------------- scikit-learn conventions
@pytest.mark.parametrize("step", [
    MeanCenter(), RegionSelect(), Segmentwise(SavitzkyGolay(window_length=3, polyorder=1)),
], ids=["mean_center", "region", "segmentwise_savgol"])
def test_steps_pass_scikit_learns_estimator_checks(step):
    # source: scikit-learn's own conformance suite, sklearn.utils.estimator_checks
    # (clone, get/set_params, fit(X, y=None) returning self, n_features_in_, unfitted
    # transform raising NotFittedError, input validation, idempotent fit, ...)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        check_estimator(step)


def test_pipeline_follows_scikit_learn_conventions(fermentation):
    # source: scikit-learn developer guide, "Rolling your own estimator" (constructor
    # stores parameters as given; fitted attributes, ending in "_", are set in fit)
    X, _, axis = fermentation
    pipe = Recipe.from_json(FULL_RECIPE).build(axis)
    assert not [k for k in vars(pipe) if k.endswith("_")]
    with pytest.raises(NotFittedError):
        pipe.transform(X)
    params = pipe.get_params()
    twin = clone(pipe)
    assert twin is not pipe and twin.recipe == pipe.recipe
    np.testing.assert_array_equal(twin.axis, pipe.axis)
    assert pipe.set_params(**params) is pipe and pipe.get_params()["recipe"] == params["recipe"]
    fitted = pipe.fit(X, None)
    assert fitted is pipe and pipe.n_features_in_ == X.shape[1]
    np.testing.assert_array_equal(clone(pipe).fit_transform(X), pipe.transform(X))
    with pytest.raises(NotFittedError):
        clone(pipe).transform(X)  # a clone carries parameters only, never the fit


def test_segmentwise_nested_parameters_reach_the_filter(fermentation):
    # source: scipy.signal.savgol_filter as the reference, after set_params on the
    # nested chemotools filter (scikit-learn's "transformer__param" convention)
    X, _, _ = fermentation
    step = Segmentwise(SavitzkyGolay(window_length=5, polyorder=2, mode="interp"),
                       [slice(0, 60), slice(60, 140)])
    step.set_params(transformer__window_length=9, transformer__deriv=1)
    out = step.fit_transform(X[:, :140])
    expected = np.hstack([savgol_filter(X[:, :60], 9, 2, deriv=1, axis=1),
                          savgol_filter(X[:, 60:140], 9, 2, deriv=1, axis=1)])
    np.testing.assert_allclose(out, expected, rtol=0, atol=1e-12)


def test_input_error_is_a_value_error():
    # source: Python convention (and scikit-learn's estimator checks) that a bad
    # argument value raises ValueError; the registry's location fields stay
    with pytest.raises(ValueError) as info:
        Recipe.from_json([{"step": "savgol", "window_length": 4, "polyorder": 2}])
    assert isinstance(info.value, InputError) and info.value.field == "steps[0].window_length"
