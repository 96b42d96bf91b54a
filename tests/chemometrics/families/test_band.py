"""Band calibration: areas against the analytical integrals of band shapes,
the calibration fit against scipy/numpy, checks, and the stored state."""

import numpy as np
import pytest
from scipy import stats

from registry.chemometrics.families import (
    BandCalibration,
    band_values,
    family_from_bytes,
    family_sha256,
    family_to_bytes,
)
from registry.errors import InputError, IntegrityError


def lorentzian(x, height, centre, gamma):
    return height * gamma ** 2 / ((x - centre) ** 2 + gamma ** 2)


def gaussian(x, height, centre, sigma):
    return height * np.exp(-((x - centre) ** 2) / (2 * sigma ** 2))


def test_lorentzian_area_equals_pi_height_halfwidth():
    # source: ∫ A·γ²/((x−x0)²+γ²) dx = π·A·γ over the whole line; over [x0−L, x0+L]
    # it is 2Aγ·arctan(L/γ), and the chord between the window ends removes
    # 2L·Aγ²/(L²+γ²) (elementary calculus)
    A, x0, gamma = 0.8, 1600.0, 4.0
    axis = np.arange(0.0, 3200.0, 0.25)
    spectrum = lorentzian(axis, A, x0, gamma)
    for L in (40.0, 400.0, 1500.0):
        chord = 2 * L * A * gamma ** 2 / (L ** 2 + gamma ** 2)
        exact = 2 * A * gamma * np.arctan(L / gamma) - chord
        area = band_values(spectrum, axis, (x0 - L, x0 + L))[0]
        assert area == pytest.approx(exact, rel=1e-5)
    # the finite window misses about 4γ/(πL) of π·A·γ (series of arctan)
    assert area == pytest.approx(np.pi * A * gamma, rel=4 * gamma / (np.pi * L) * 1.01)
    assert area < np.pi * A * gamma


def test_gaussian_area_and_height():
    # source: ∫ A·exp(−x²/2σ²) dx = A·σ·√(2π); tails beyond ±8σ are below 1e-14
    A, x0, sigma = 1.2, 2950.0, 6.0
    axis = np.arange(2700.0, 3200.0, 0.5)
    spectrum = gaussian(axis, A, x0, sigma)
    band = (x0 - 8 * sigma, x0 + 8 * sigma)
    assert band_values(spectrum, axis, band)[0] == pytest.approx(A * sigma * np.sqrt(2 * np.pi),
                                                                 rel=1e-9)
    assert band_values(spectrum, axis, band, measure="height")[0] == pytest.approx(A, rel=1e-12)


def test_descending_axis_sloped_background_and_off_grid_limits():
    # source: a straight background is removed exactly by the two-point baseline,
    # so the area is that of the Gaussian band alone (A·σ·√(2π)); an axis written
    # 4000 → 400 (as instruments do) gives the same positive area
    A, x0, sigma = 0.5, 1710.0, 5.0
    axis = np.arange(1500.0, 1900.0, 0.5)
    spectrum = gaussian(axis, A, x0, sigma) + 0.2 + 3e-4 * (axis - 1500.0)
    band = (x0 - 50.13, x0 + 50.37)  # limits between axis points
    expected = A * sigma * np.sqrt(2 * np.pi)
    asc = band_values(spectrum, axis, band)[0]
    desc = band_values(spectrum[::-1], axis[::-1], band[::-1])[0]
    assert asc == pytest.approx(expected, rel=1e-6)
    assert desc == asc


def test_separate_anchor_points():
    # source: anchors away from the band edges: the baseline is the line through the
    # absorbance at the anchors; on a straight background it is the background itself
    axis = np.linspace(1000.0, 1400.0, 1601)
    spectrum = gaussian(axis, 0.3, 1200.0, 4.0) + 0.1 + 1e-4 * axis
    area = band_values(spectrum, axis, (1170, 1230), anchors=(1100, 1300))[0]
    assert area == pytest.approx(0.3 * 4.0 * np.sqrt(2 * np.pi), rel=1e-6)


@pytest.fixture(scope="module")
def series():
    """Gaussian band whose height follows concentration with scatter, on a
    descending axis; the heights are the band values the fit sees."""
    rng = np.random.default_rng(11)
    axis = np.arange(1900.0, 1500.0, -1.0)
    conc = np.linspace(1.0, 10.0, 12)
    heights = 0.05 * conc + rng.normal(0, 0.004, conc.size)
    X = np.array([gaussian(axis, h, 1700.0, 8.0) + 0.05 for h in heights])
    return X, conc, axis


def test_linear_fit_statistics_equal_scipy_linregress(series):
    # source: scipy.stats.linregress (slope, intercept, their standard errors, r)
    X, y, axis = series
    model = BandCalibration(band=(1640, 1760), measure="area").fit(X, y, axis)
    ref = stats.linregress(model.calibration_values_, y)
    b0, b1 = model.coefficients_
    se0, se1 = model.coefficient_se_
    assert (b0, b1) == pytest.approx((ref.intercept, ref.slope), rel=1e-9)
    assert (se0, se1) == pytest.approx((ref.intercept_stderr, ref.stderr), rel=1e-9)
    assert model.statistics_["r2"] == pytest.approx(ref.rvalue ** 2, rel=1e-9)
    resid = y - (b0 + b1 * model.calibration_values_)
    sec = np.sqrt(resid @ resid / (y.size - 2))
    assert model.statistics_["sec"] == pytest.approx(sec, rel=1e-9)
    np.testing.assert_allclose(model.predict(X[:, ::-1], axis[::-1]),
                               b0 + b1 * model.calibration_values_, rtol=1e-12)


def test_quadratic_fit_equals_numpy_polyfit(series):
    # source: numpy.polyfit(deg=2, cov=True): coefficients and their covariance
    # (scaled by RSS/(n − 3))
    X, y, axis = series
    model = BandCalibration(band=(1640, 1760), measure="height", degree=2).fit(X, y, axis)
    coef, cov = np.polyfit(model.calibration_values_, y, 2, cov=True)
    np.testing.assert_allclose(model.coefficients_, coef[::-1], rtol=1e-7)
    np.testing.assert_allclose(model.coefficient_cov_, cov[::-1, ::-1], rtol=1e-6)


def test_checks_flag_range_anchor_and_saturation(series):
    # source: the check definitions (calibration range of the band value and of each
    # anchor absorbance; the stated saturation limit)
    X, y, axis = series
    model = BandCalibration(band=(1640, 1760), anchors=(1600, 1800),
                            saturation_limit=0.4).fit(X, y, axis)
    inside = X[3]
    too_big = gaussian(axis, 0.9, 1700.0, 8.0) + 0.05       # area and peak beyond calibration
    raised = X[3] + np.where(axis < 1650, 0.3, 0.0)         # lifted 1600 anchor
    res = model.check(np.array([inside, too_big, raised]), axis)
    assert res.flag_lists() == [[], ["band_range", "saturation"], ["band_range", "baseline_anchor"]]
    rec = res.records()[1]
    assert rec["band_max_absorbance"] == pytest.approx(0.95, rel=1e-6)
    assert rec["saturation_limit"] == 0.4 and len(rec["anchor_absorbance"]) == 2
    assert rec["band_min"] == model.value_min_ and rec["flags"] == ["band_range", "saturation"]


def test_state_round_trip_is_bit_identical_and_hashed(series):
    # source: artifact contract (plain arrays + JSON, hash checked on load)
    X, y, axis = series
    model = BandCalibration(band=(1640, 1760), degree=2).fit(X, y, axis)
    blob = family_to_bytes(model, metadata={"property": "AROMATICS"})
    sha = family_sha256(model, metadata={"property": "AROMATICS"})
    loaded, meta, _ = family_from_bytes(blob, sha)
    assert meta == {"property": "AROMATICS"}
    np.testing.assert_array_equal(loaded.predict(X[:, ::-1]), model.predict(X[:, ::-1]))
    assert loaded.check(X[:, ::-1]).records() == model.check(X[:, ::-1]).records()
    assert family_to_bytes(loaded, metadata={"property": "AROMATICS"}) == blob
    with pytest.raises(IntegrityError):
        family_from_bytes(blob[:-1] + b"\1", sha)


def test_bad_band_settings_are_refused(series):
    X, y, axis = series
    with pytest.raises(InputError) as err:
        BandCalibration(band=(1000, 1200)).fit(X, y, axis)
    assert err.value.field == "band"
    with pytest.raises(InputError):
        BandCalibration(band=(1700, 1700)).fit(X, y, axis)
    with pytest.raises(InputError) as err:
        BandCalibration(band=(1640, 1760), degree=3).fit(X, y, axis)
    assert err.value.field == "degree"
