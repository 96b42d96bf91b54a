"""The Q-residual limit on residual spaces with a long tail of small eigenvalues.

References checked against:
- Box, Ann. Math. Stat. 25:290 (1954): Q = Σλⱼzⱼ² ≈ g·χ²(h), g = θ2/θ1, h = θ1²/θ2.
- Jackson & Mudholkar, Technometrics 21:341 (1979): their limit needs h0 = 1 − 2θ1θ3/(3θ2²) > 0.
- The distribution of Q itself, by simulation: Σλⱼzⱼ² drawn with numpy for known eigenvalues,
  and new spectra drawn from the same distribution as the calibration spectra.
"""

import numpy as np
import pytest
from scipy import stats

from registry.chemometrics import ApplicabilityDomain, PLSRegressor
from registry.chemometrics.diagnostics import (box_limit, jackson_mudholkar_h0,
                                               jackson_mudholkar_limit)
from registry.errors import InputError

AXIS = np.linspace(0.0, 1.0, 400)
CONFIDENCE = 0.99


def jm_reference_limit(eigenvalues, confidence):
    # Jackson & Mudholkar, Technometrics 21:341 (1979), eq. for Q_alpha, written out
    # independently of the module (and evaluated even where h0 <= 0, as the old code did)
    t1, t2, t3 = (np.sum(eigenvalues ** i) for i in (1, 2, 3))
    h0 = 1 - 2 * t1 * t3 / (3 * t2 ** 2)
    c = stats.norm.ppf(confidence)
    return t1 * (c * np.sqrt(2 * t2 * h0 ** 2) / t1 + 1 + t2 * h0 * (h0 - 1) / t1 ** 2) ** (1 / h0)


def long_tail_sampler(seed, n_weak=60, ratio=0.9, noise=0.03):
    """Spectra on 400 points: 5 strong smooth bands whose amounts set y, 60 weak smooth
    bands with amplitude SD 0.3·ratio^j (a geometrically decaying tail) and white noise."""
    rng = np.random.default_rng(seed)

    def bands(m):
        centre, width = rng.uniform(0.02, 0.98, m), rng.uniform(0.01, 0.05, m)
        return np.exp(-0.5 * ((AXIS[None, :] - centre[:, None]) / width[:, None]) ** 2)

    strong, weak = bands(5), bands(n_weak)
    weak_sd = 0.3 * ratio ** np.arange(n_weak)
    beta = rng.normal(0, 1, 5)

    def draw(n, rng):
        amounts = rng.normal(0, 1, (n, 5))
        X = (1.0 + amounts @ strong + (rng.normal(0, 1, (n, n_weak)) * weak_sd) @ weak
             + noise * rng.normal(0, 1, (n, AXIS.size)))
        return X, amounts @ beta + 0.05 * rng.normal(0, 1, n)
    return draw


@pytest.fixture(scope="module")
def long_tail():
    """150 calibration spectra and 5,000 new ones from the same distribution (seed 0)."""
    draw = long_tail_sampler(0)
    rng = np.random.default_rng(1000)
    X_cal, y_cal = draw(150, rng)
    X_new, _ = draw(5000, rng)
    return X_cal, y_cal, X_new, PLSRegressor(15).fit(X_cal, y_cal)


def test_q_limit_flags_about_one_percent_of_new_spectra_at_every_component_count(long_tail):
    # source: simulation. New spectra drawn from the calibration's own distribution must
    # exceed the 99 % limit about 1 % of the time; 0.3-3 % is the band asked for at every
    # A = 1..15. Across sampler seeds 0-9 (calibration rng 1000 + seed) 8 of 10 keep every
    # A in the band; in the other two the worst A flags 3.7 % and 4.9 %.
    X_cal, y_cal, X_new, pls = long_tail
    rates = []
    for A in range(1, 16):
        domain = ApplicabilityDomain(confidence=CONFIDENCE, n_components=A).fit(X_cal, pls, y_cal)
        q = domain.assess(X_new, pls.predict(X_new, A)).q
        rates.append(np.mean(q > domain.q_limit_))
        assert domain.q_limit_form_ == "box"
    rates = np.array(rates)
    assert np.all((rates >= 0.003) & (rates <= 0.03)), np.round(100 * rates, 2)


@pytest.mark.parametrize("n_resid, noise, method, form", [
    (40, 0.02, "box", "box"),  # long tail + noise: h0 near 0
    (8, 0.005, "jackson-mudholkar", "jackson-mudholkar"),  # few directions: h0 clearly > 0
])
def test_q_limit_of_a_gaussian_space_matches_the_simulated_99_percent_point(n_resid, noise,
                                                                            method, form):
    # source: simulation. Spectra = 3 latent directions carrying y + a Gaussian residual
    # with known covariance eigenvalues (0.5·0.85^j on n_resid directions, plus white
    # noise); a 3-component model leaves that residual, whose Q for 20,000 new spectra
    # gives the empirical 99 % point the limit must be within 15 % of, and the share
    # beyond the limit must be 0.3-3 %. Jackson-Mudholkar, where asked for, is used only
    # with h0 clearly positive.
    rng = np.random.default_rng(5)
    k, n = 300, 150
    basis, _ = np.linalg.qr(rng.normal(size=(k, 3 + n_resid)))
    latent, resid_dirs = basis[:, :3] * 5.0, basis[:, 3:]
    resid_sd = np.sqrt(0.5 * 0.85 ** np.arange(n_resid))
    beta = np.array([1.0, -0.5, 0.3])

    def draw(m):
        scores = rng.normal(size=(m, 3))
        X = (2.0 + scores @ latent.T + (rng.normal(size=(m, n_resid)) * resid_sd) @ resid_dirs.T
             + noise * rng.normal(size=(m, k)))
        return X, scores @ beta + 0.05 * rng.normal(size=m)

    X_cal, y_cal = draw(n)
    X_new, _ = draw(20_000)
    pls = PLSRegressor(3).fit(X_cal, y_cal)
    domain = ApplicabilityDomain(confidence=CONFIDENCE, q_limit_method=method).fit(X_cal, pls, y_cal)
    assert domain.q_limit_form_ == form and domain.q_limit_note_ == ""
    q = domain.assess(X_new, pls.predict(X_new)).q
    assert domain.q_limit_ == pytest.approx(np.quantile(q, CONFIDENCE), rel=0.15)
    assert 0.003 <= np.mean(q > domain.q_limit_) <= 0.03


def test_old_jackson_mudholkar_limit_collapses_where_h0_is_not_positive(long_tail):
    # source: Jackson & Mudholkar (1979) require h0 > 0. The former default evaluated
    # their formula on the unscaled eigenvalues of the fitted calibration residuals
    # whatever h0 was; with h0 <= 0 the limit falls below the typical Q and nearly
    # every new spectrum is flagged. The new default (Box) flags about 1 %.
    X_cal, y_cal, X_new, pls = long_tail
    collapsed = 0
    for A in range(1, 16):
        domain = ApplicabilityDomain(confidence=CONFIDENCE, n_components=A).fit(X_cal, pls, y_cal)
        fitted_eig = domain.residual_eigenvalues_
        if jackson_mudholkar_h0(fitted_eig) > 0:
            continue
        collapsed += 1
        q = domain.assess(X_new, pls.predict(X_new, A)).q
        old_limit = jm_reference_limit(fitted_eig, CONFIDENCE)
        assert old_limit < np.mean(domain.calibration_q_)
        assert np.mean(q > old_limit) > 0.5
        assert np.mean(q > domain.q_limit_) <= 0.03
        with pytest.raises(InputError, match="h0"):
            jackson_mudholkar_limit(fitted_eig, CONFIDENCE)
        # asking for Jackson-Mudholkar there gives Box, and says so
        asked = ApplicabilityDomain(confidence=CONFIDENCE, n_components=A,
                                    q_limit_method="jackson-mudholkar").fit(X_cal, pls, y_cal)
        assert asked.q_limit_form_ == "box" and asked.q_limit_ == domain.q_limit_
        assert "h0" in asked.q_limit_note_
    assert collapsed >= 3  # the long tail does give h0 <= 0 at several component counts


def _simulated_q(eigenvalues, noise_level, noise_count, n_draws, seed):
    # Q = Σλⱼzⱼ² drawn directly; the equal noise eigenvalues are summed as one χ²
    rng = np.random.default_rng(seed)
    q = noise_level * rng.chisquare(noise_count, n_draws)
    for lam in eigenvalues:
        q += lam * rng.standard_normal(n_draws) ** 2
    return q


def test_box_limit_matches_the_simulated_99_percent_point():
    # source: simulation of Q = Σλⱼzⱼ² (200,000 draws) for known eigenvalues.
    # A long tail (60 geometric eigenvalues plus 400 equal noise ones): h0 < 0, so
    # Jackson-Mudholkar does not hold, Box does (within 15 %).
    tail, floor, n_floor = 0.9 ** np.arange(60), 0.01, 400
    eig = np.concatenate([tail, np.full(n_floor, floor)])
    assert jackson_mudholkar_h0(eig) < 0
    q = _simulated_q(tail, floor, n_floor, 200_000, seed=1)
    for conf in (0.95, 0.99):
        assert box_limit(eig, conf) == pytest.approx(np.quantile(q, conf), rel=0.15)
    with pytest.raises(InputError):
        jackson_mudholkar_limit(eig, 0.99)
    # A few comparable eigenvalues: h0 clearly positive, and both forms hold.
    few = np.array([5.0, 3.0, 2.0, 1.0, 0.5])
    assert jackson_mudholkar_h0(few) > 0.1
    q = _simulated_q(few, 0.0, 1, 200_000, seed=2)
    empirical = np.quantile(q, 0.99)
    assert box_limit(few, 0.99) == pytest.approx(empirical, rel=0.15)
    assert jackson_mudholkar_limit(few, 0.99) == pytest.approx(empirical, rel=0.15)
    assert jackson_mudholkar_limit(few, 0.99) == pytest.approx(jm_reference_limit(few, 0.99),
                                                               rel=1e-12)


def test_box_limit_is_g_times_scipy_chi_square():
    # source: scipy.stats.chi2 with g = θ2/θ1, h = θ1²/θ2 (Box 1954); equal eigenvalues
    # make Q exactly λ·χ²(m), so g = λ and h = m reproduce scipy's quantile exactly
    eig = np.array([4.0, 2.0, 1.0, 0.5, 0.25])
    t1, t2 = eig.sum(), np.sum(eig ** 2)
    assert box_limit(eig, 0.99) == pytest.approx(t2 / t1 * stats.chi2.ppf(0.99, t1 ** 2 / t2),
                                                 rel=1e-12)
    assert box_limit(np.full(7, 0.3), 0.95) == pytest.approx(0.3 * stats.chi2.ppf(0.95, 7),
                                                             rel=1e-12)
