"""Classical least squares against numpy/scipy solvers and least-squares theory;
the Box residual limit against exact chi-squared cases and Monte Carlo."""

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import lsq_linear, nnls

from registry.chemometrics.families import (
    ClassicalLeastSquares,
    box_residual_limit,
    family_from_bytes,
    family_sha256,
    family_to_bytes,
)
from registry.errors import InputError

AXIS = np.linspace(900.0, 1800.0, 240)
SIGMA = 0.002  # noise SD per point


def lorentz(centre, gamma, height=1.0):
    return height * gamma ** 2 / ((AXIS - centre) ** 2 + gamma ** 2)


@pytest.fixture(scope="module")
def pure():
    """Three overlapping component spectra made of Lorentzian bands."""
    return np.array([
        lorentz(1000, 12) + 0.5 * lorentz(1450, 20),
        lorentz(1060, 15) + 0.7 * lorentz(1600, 10),
        lorentz(1250, 25) + 0.4 * lorentz(1470, 18),
    ])


@pytest.fixture(scope="module")
def mixtures(pure):
    rng = np.random.default_rng(5)
    C = rng.uniform(0.1, 1.0, (30, 3))
    return C, C @ pure, rng


def test_noise_free_concentrations_are_exact(pure, mixtures):
    # source: Beer–Lambert mixtures X = CK solved exactly when K has full rank
    C, X, _ = mixtures
    from_pure = ClassicalLeastSquares(pure_spectra=pure).fit(X)
    np.testing.assert_allclose(from_pure.predict(X), C, rtol=1e-10)
    estimated = ClassicalLeastSquares().fit(X, C)
    np.testing.assert_allclose(estimated.K_, pure, atol=1e-12)
    np.testing.assert_allclose(estimated.predict(X), C, rtol=1e-10)
    for baseline, shifted in (("offset", X + 0.05), ("linear", X + 0.05 + 1e-4 * (AXIS - 900.0))):
        model = ClassicalLeastSquares(pure_spectra=pure, baseline=baseline).fit(shifted)
        np.testing.assert_allclose(model.predict(shifted), C, rtol=1e-9)
    coef = ClassicalLeastSquares(pure_spectra=pure, baseline="offset").fit(X + 0.05)
    np.testing.assert_allclose(coef.baseline_coefficients(X + 0.05), 0.05, rtol=1e-9)


def test_noisy_concentrations_equal_lstsq_and_nnls(pure, mixtures):
    # source: numpy.linalg.lstsq and scipy.optimize.nnls on x ≈ cK, sample by sample
    C, X, rng = mixtures
    # very low concentrations + noise: some least-squares solutions go negative
    noisy = np.array([[0.002, 0.4, 0.0], [0.0, 0.003, 0.8]]) @ pure \
        + rng.normal(0, 0.02, (2, AXIS.size))
    noisy = np.vstack([noisy, X[:5] + rng.normal(0, SIGMA, (5, AXIS.size))])
    ls = ClassicalLeastSquares(pure_spectra=pure).fit(X)
    nn = ClassicalLeastSquares(pure_spectra=pure, non_negative=True).fit(X)
    ref_ls = np.array([np.linalg.lstsq(pure.T, x, rcond=None)[0] for x in noisy])
    ref_nn = np.array([nnls(pure.T, x)[0] for x in noisy])
    assert (ref_ls < 0).any()  # the constraint matters for this data
    np.testing.assert_allclose(ls.predict(noisy), ref_ls, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(nn.predict(noisy), ref_nn, rtol=1e-9, atol=1e-12)


def test_non_negative_with_free_baseline_equals_bounded_least_squares(pure, mixtures):
    # source: scipy.optimize.lsq_linear on [K' G'] with c ≥ 0 and the baseline free
    C, X, rng = mixtures
    x = np.array([0.0, 0.5, 0.02]) @ pure - 0.03 + 2e-5 * (AXIS - 900) \
        + rng.normal(0, 0.01, AXIS.size)
    model = ClassicalLeastSquares(pure_spectra=pure, non_negative=True,
                                  baseline="linear").fit(X, axis=AXIS)
    G = model.baseline_basis_
    design = np.vstack([pure, G]).T
    ref = lsq_linear(design, x, bounds=([0, 0, 0, -np.inf, -np.inf], np.inf), tol=1e-14,
                     method="bvls").x
    np.testing.assert_allclose(model.predict(x), ref[None, :3], atol=1e-8)
    np.testing.assert_allclose(model.baseline_coefficients(x), ref[None, 3:], atol=1e-8)


def test_estimated_K_recovers_pure_spectra_within_noise(pure, mixtures):
    # source: ordinary least squares theory: each column of K̂ = C⁺X has covariance
    # σ²(C'C)⁻¹, so (K̂ − K)/(σ·√diag((C'C)⁻¹)) is standard normal; its mean square
    # over all 720 entries is χ²(720)/720 (95 % range 0.90–1.11)
    C, X, rng = mixtures
    noisy = X + rng.normal(0, SIGMA, X.shape)
    model = ClassicalLeastSquares().fit(noisy, C)
    scale = SIGMA * np.sqrt(np.diag(np.linalg.inv(C.T @ C)))
    z = (model.K_ - pure) / scale[:, None]
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], z.size) / z.size
    assert lo < np.mean(z ** 2) < hi


def test_leave_one_out_residual_limit_covers_new_mixtures(pure):
    # source: a 95 % limit on Q must pass 95 % of new samples from the same population
    # (definition of the limit). One calibration set of 25 gives a limit with its own
    # sampling spread, so the rate is averaged over 20 calibration sets × 400 new
    # mixtures each; the spread of the 20 rates bounds how far that mean may sit
    # from 5 %. Fitted calibration residuals would set the limit below the typical
    # new-sample Q (they miss the estimation error of K): hence leave-one-out.
    rng = np.random.default_rng(21)
    rates = []
    for _ in range(20):
        C = rng.uniform(0.1, 1.0, (25, 3))
        model = ClassicalLeastSquares().fit(C @ pure + rng.normal(0, SIGMA, (25, AXIS.size)), C)
        C_new = rng.uniform(0.1, 1.0, (400, 3))
        res = model.check(C_new @ pure + rng.normal(0, SIGMA, (400, AXIS.size)))
        rates.append(res.flags["residual"].mean())
    rates = np.array(rates)
    half_width = 3 * rates.std(ddof=1) / np.sqrt(rates.size)
    assert abs(rates.mean() - 0.05) < half_width, (rates.mean(), half_width)
    assert res.records()[0]["q_limit"] == model.q_limit_


def test_box_limit_is_exact_for_equal_eigenvalues():
    # source: with m equal eigenvalues λ, Q = λ·χ²(m) exactly and Box's g = λ, h = m
    lam = np.full(7, 0.3)
    assert box_residual_limit(0.95, eigenvalues=lam) == pytest.approx(0.3 * stats.chi2.ppf(0.95, 7),
                                                                      rel=1e-12)


def test_box_limit_matches_monte_carlo_quantile():
    # source: Monte Carlo of Q = Σ λj zj² (zj standard normal), 400 000 draws; Box's
    # two-moment approximation is within about 1 % at 95 % for a spread spectrum of
    # eigenvalues (Box 1954, table comparisons; checked here, not assumed)
    rng = np.random.default_rng(3)
    lam = np.array([2.0, 1.0, 0.6, 0.3, 0.2, 0.1, 0.05])
    q = (rng.standard_normal((400_000, lam.size)) ** 2) @ lam
    mc = np.quantile(q, 0.95)
    assert box_residual_limit(0.95, eigenvalues=lam) == pytest.approx(mc, rel=0.015)
    # Nomikos & MacGregor: the same moments taken from observed Q values
    assert box_residual_limit(0.95, q_values=q) == pytest.approx(mc, rel=0.015)


def test_condition_number_is_unit_scaled_and_flags(pure, mixtures):
    # source: numpy.linalg.cond of K with unit-length rows; scaling a component's
    # concentration unit leaves it unchanged (Belsley, Kuh & Welsch 1980 scaling)
    C, X, _ = mixtures
    model = ClassicalLeastSquares(pure_spectra=pure).fit(X)
    unit = pure / np.linalg.norm(pure, axis=1)[:, None]
    assert model.condition_number_ == pytest.approx(np.linalg.cond(unit), rel=1e-12)
    rescaled = ClassicalLeastSquares(pure_spectra=pure * np.array([[1e3], [1.0], [1e-2]])).fit(X)
    assert rescaled.condition_number_ == pytest.approx(model.condition_number_, rel=1e-9)
    near = np.vstack([pure, pure[0] + 0.01 * lorentz(1700, 10)])
    flagged = ClassicalLeastSquares(pure_spectra=near, condition_limit=30).fit(X)
    res = flagged.check(X[:2])
    assert flagged.condition_number_ > 30 and res.flag_lists() == [["condition"], ["condition"]]


def test_dependent_components_and_too_few_mixtures_are_refused(pure, mixtures):
    C, X, _ = mixtures
    with pytest.raises(InputError) as err:
        ClassicalLeastSquares(pure_spectra=np.vstack([pure, pure[0] + pure[1]])).fit(X)
    assert err.value.field == "pure_spectra"
    with pytest.raises(InputError):  # a constant spectrum is the offset baseline itself
        ClassicalLeastSquares(pure_spectra=np.vstack([pure, np.ones(AXIS.size)]),
                              baseline="offset").fit(X)
    with pytest.raises(InputError) as err:
        ClassicalLeastSquares().fit(X[:4], C[:4])
    assert err.value.field == "X"


def test_state_round_trip_is_bit_identical(pure, mixtures):
    # source: artifact contract (plain arrays + JSON, hash checked on load)
    C, X, rng = mixtures
    noisy = X + rng.normal(0, SIGMA, X.shape)
    for model in (ClassicalLeastSquares(baseline="linear", non_negative=True)
                  .fit(noisy, C, axis=AXIS),
                  ClassicalLeastSquares(pure_spectra=pure).fit(noisy)):
        loaded, _, _ = family_from_bytes(family_to_bytes(model), family_sha256(model))
        np.testing.assert_array_equal(loaded.predict(noisy), model.predict(noisy))
        assert loaded.check(noisy).records() == model.check(noisy).records()
        assert family_to_bytes(loaded) == family_to_bytes(model)
