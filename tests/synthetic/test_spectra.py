"""Beer–Lambert rendering and instrument effects of the synthetic analyzers."""

import numpy as np
import pandas as pd
import pytest

from registry.errors import InputError
from seed_demo.synthetic import (SECOND_ANALYZER, Analyzer,
                                 default_axis, generate_population,
                                 pure_component_spectra, render_spectra)

QUIET = dict(noise_sd=0.0, offset_sd=0.0, slope_sd=0.0, multiplicative_sd=0.0)


def test_default_axis_is_the_mid_ir_range_on_a_2_cm_grid():
    # 4000–650 cm⁻¹, the usual mid-IR range (common practice); the demo's 2 cm⁻¹ grid,
    # ascending float64, as generate_population documents
    axis = default_axis()
    assert axis.dtype == np.float64 and axis.ndim == 1
    assert axis[0] == 650.0 and axis[-1] == 4000.0
    np.testing.assert_allclose(np.diff(axis), 2.0, rtol=0, atol=1e-9)
    assert axis.size == 1676


def test_beer_lambert_absorbance_is_proportional_to_path_and_additive():
    # Beer–Lambert: A = L·Σ c_k ε_k — doubling L doubles A, and a mixture is
    # the volume-weighted sum of its neat components (ideal mixing)
    names = ["isooctane", "toluene", "ethanol"]
    comp = pd.DataFrame([[0.5, 0.3, 0.2]], columns=names)
    thin = Analyzer("thin", pathlength_um=25.0, **QUIET)
    thick = Analyzer("thick", pathlength_um=50.0, **QUIET)
    rng = np.random.default_rng(0)
    a_thin = render_spectra(comp, thin, rng)
    a_thick = render_spectra(comp, thick, rng)
    np.testing.assert_allclose(a_thick, 2.0 * a_thin, rtol=1e-12)
    pure = pure_component_spectra(names, thin)
    np.testing.assert_allclose(a_thin[0], 25.0 * (0.5 * pure[0] + 0.3 * pure[1] + 0.2 * pure[2]),
                               rtol=1e-12)


def _fine_benzene(analyzer):
    axis = np.arange(640.0, 710.0, 0.05)
    return axis, pure_component_spectra(["benzene"], analyzer, axis)[0]


def test_wavenumber_shift_moves_the_band_centroid():
    # a shift of every band by δ moves the centroid of a symmetric band by δ
    # (definition of the centroid); the second analyzer is shifted +0.3 cm⁻¹
    a0 = Analyzer("a0", shift_cm=0.0, resolution_cm=4.0)
    a1 = Analyzer("a1", shift_cm=0.3, resolution_cm=4.0)
    axis, y0 = _fine_benzene(a0)
    _, y1 = _fine_benzene(a1)
    centroid = lambda y: np.sum(axis * y) / np.sum(y)  # noqa: E731
    assert centroid(y1) - centroid(y0) == pytest.approx(0.3, abs=0.01)


@pytest.mark.parametrize("resolution", [4.0, 6.0])
def test_gaussian_line_shape_widens_the_benzene_band(resolution):
    # the benzene band is a 5 cm⁻¹ FWHM Gaussian; a Gaussian convolved with a
    # Gaussian is Gaussian with variances adding, so FWHM = √(5² + res²)
    # (standard convolution result)
    axis, y = _fine_benzene(Analyzer("a", resolution_cm=resolution))
    half = y.max() / 2
    above = axis[y >= half]
    measured = above[-1] - above[0]
    assert measured == pytest.approx(np.hypot(5.0, resolution), abs=0.1)


def test_two_analyzers_differ_by_their_path_length_ratio_in_band_area():
    # band area is unchanged by a shift or a normalised line shape, so the
    # integrated absorbance ratio is the path-length ratio 51/50 (Beer–Lambert)
    pop = generate_population(3, seed=3, analyzer=Analyzer("q1", **QUIET))
    quiet_second = Analyzer("q2", pathlength_um=SECOND_ANALYZER.pathlength_um,
                            shift_cm=SECOND_ANALYZER.shift_cm,
                            resolution_cm=SECOND_ANALYZER.resolution_cm, **QUIET)
    a2 = render_spectra(pop.composition, quiet_second, np.random.default_rng(0))
    ratio = np.trapezoid(a2, pop.axis, axis=1) / np.trapezoid(pop.spectra, pop.axis, axis=1)
    np.testing.assert_allclose(ratio, 51.0 / 50.0, rtol=2e-3)
    # yet the spectra are not identical point by point (shift and resolution)
    assert np.abs(a2 - pop.spectra).max() > 0.01 * pop.spectra.max()


def test_absorbance_stays_in_the_linear_range():
    # neat fuel in 25–100 µm cells (common practice): typical CH-stretch
    # maxima below 1.5 at the 50 µm default, everything below 2 even at 100 µm
    # (where Beer–Lambert stays linear; common practice)
    gasoline = generate_population(500, seed=1)
    ch = (gasoline.axis >= 2800) & (gasoline.axis <= 3000)
    assert np.percentile(gasoline.spectra[:, ch].max(axis=1), 95) < 1.5
    thick = Analyzer("thick", pathlength_um=100.0)
    for family in ("gasoline", "diesel"):
        pop = generate_population(300, family=family, seed=2, analyzer=thick)
        assert pop.spectra.max() < 2.0, family
        # and the strongest band still shows: absorbance well above the noise
        assert pop.spectra.max() > 0.5, family


def test_noise_level_matches_the_analyzer_setting():
    # white noise of σ = noise_sd: the difference of two renders of the same
    # blend without baseline terms has σ·√2 (variance of a difference)
    noisy = Analyzer("n", noise_sd=1e-3, offset_sd=0.0, slope_sd=0.0, multiplicative_sd=0.0)
    comp = pd.DataFrame({"isooctane": [1.0, 1.0]})
    a = render_spectra(comp, noisy, np.random.default_rng(5))
    assert np.std(a[0] - a[1]) == pytest.approx(1e-3 * np.sqrt(2), rel=0.06)


def test_bad_compositions_are_refused_with_their_location():
    rng = np.random.default_rng(0)
    with pytest.raises(InputError) as err:
        render_spectra(pd.DataFrame({"isooctane": [1.0, 0.9]}), None, rng)
    assert err.value.line == 2 and "sum" in err.value.message
    with pytest.raises(InputError) as err:
        render_spectra(pd.DataFrame({"isooctane": [1.1], "toluene": [-0.1]}), None, rng)
    assert err.value.field == "toluene"
    with pytest.raises(InputError) as err:
        render_spectra(pd.DataFrame({"kerosene": [1.0]}), None, rng)
    assert err.value.field == "kerosene"
    with pytest.raises(InputError) as err:
        render_spectra(pd.DataFrame({"isooctane": [1.0]}), None, rng, axis=[4000.0, 650.0])
    assert err.value.field == "axis"
    with pytest.raises(InputError) as err:
        Analyzer("bad", pathlength_um=0.0)
    assert err.value.field == "pathlength_um"
