"""Prediction-time checks against numpy/scipy and the published formulas."""

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import mahalanobis

from registry.chemometrics import ApplicabilityDomain, PLSRegressor
from registry.chemometrics.diagnostics import FLAG_NAMES


@pytest.fixture(scope="module")
def fitted(low_rank_regression):
    X, y = low_rank_regression
    cal, new = X[:60], X[60:]
    model = PLSRegressor(5).fit(cal, y[:60])
    domain = ApplicabilityDomain().fit(cal, model, y[:60])
    return cal, new, y[:60], model, domain


def test_leverage_is_hat_matrix_diagonal(fitted):
    # source: hat matrix of the centred scores, H = T(T'T)^-1 T' + 11'/n,
    # computed directly with numpy
    cal, new, y, model, domain = fitted
    T = model.transform(cal)
    n = T.shape[0]
    H = T @ np.linalg.inv(T.T @ T) @ T.T + 1.0 / n
    np.testing.assert_allclose(domain.calibration_leverage_, np.diag(H), rtol=1e-10)
    res = domain.assess(cal, model.predict(cal))
    np.testing.assert_allclose(res.leverage, np.diag(H), rtol=1e-10)
    # new samples: h = t'(T'T)^-1 t + 1/n
    t_new = model.transform(new)
    h_new = np.einsum("ij,jk,ik->i", t_new, np.linalg.inv(T.T @ T), t_new) + 1.0 / n
    np.testing.assert_allclose(domain.assess(new, model.predict(new)).leverage, h_new, rtol=1e-10)

def test_mean_leverage_is_a_plus_one_over_n_and_the_screen_is_three_times_it(fitted):
    # source: the hat matrix H = 11'/n + T(T'T)^-1 T' of a mean-centred model has trace
    # A + 1 (numpy.trace), so the mean calibration leverage is (A + 1)/n exactly; the
    # outlier screen is three times that mean, 3(A + 1)/n (ASTM E1655, from memory)
    cal, new, y, model, domain = fitted
    T = model.transform(cal)
    n, A = T.shape
    H = T @ np.linalg.inv(T.T @ T) @ T.T + 1.0 / n
    assert np.trace(H) == pytest.approx(A + 1, rel=1e-12)
    assert np.mean(domain.calibration_leverage_) == pytest.approx((A + 1) / n, rel=1e-12)
    screen = np.diag(H) > 3 * (A + 1) / n
    # this data tells the two rules apart: 3A/n would screen out more samples
    assert not np.array_equal(screen, np.diag(H) > 3 * A / n)
    np.testing.assert_array_equal(domain.calibration_outliers_, screen)


def test_hotelling_t2_and_limit(fitted):
    # source: T^2 = t' S^-1 t with S = numpy.cov of the calibration scores;
    # limit for a new observation A(n^2-1)/(n(n-A)) F(0.95; A, n-A)
    # (Tracy, Young & Mason 1992; from memory)
    cal, new, y, model, domain = fitted
    T = model.transform(cal)
    n, A = T.shape
    S_inv = np.linalg.inv(np.cov(T, rowvar=False))
    t_new = model.transform(new)
    res = domain.assess(new, model.predict(new))
    np.testing.assert_allclose(res.t2, np.einsum("ij,jk,ik->i", t_new, S_inv, t_new), rtol=1e-10)
    limit = A * (n ** 2 - 1) / (n * (n - A)) * stats.f.ppf(0.95, A, n - A)
    assert res.t2_limit == pytest.approx(limit, rel=1e-12)
    np.testing.assert_array_equal(res.flags["hotelling_t2"], res.t2 > limit)


def test_nearest_neighbour_equals_scipy_mahalanobis(fitted):
    # source: scipy.spatial.distance.mahalanobis with VI = inverse score covariance
    cal, new, y, model, domain = fitted
    T = model.transform(cal)
    VI = np.linalg.inv(np.cov(T, rowvar=False))
    t_new = model.transform(new)
    res = domain.assess(new, model.predict(new))
    expected = [min(mahalanobis(t, c, VI) for c in T) for t in t_new]
    np.testing.assert_allclose(res.nn_distance, expected, rtol=1e-8)
    inner = [min(mahalanobis(T[i], T[j], VI) for j in range(len(T)) if j != i)
             for i in range(len(T))]
    assert domain.nn_limit_ == pytest.approx(max(inner), rel=1e-8)


def test_q_residual_and_its_box_limit(fitted):
    # source: residual E = X_c - T P' and eigenvalues of its covariance from
    # numpy.linalg.eigvalsh (not the SVD the module uses). E is the least-squares
    # residual of X on [1, T] (numpy.linalg.lstsq), so it has n - A - 1 degrees of
    # freedom, and a new sample's residual variance is larger by 1 + (A + 1)/n on
    # average (fitted residual σ²(1 - h), prediction residual σ²(1 + h): Draper & Smith,
    # Applied Regression Analysis, 3rd ed., 1998, from memory). The limit is Box's
    # g·χ²(h), g = θ2/θ1, h = θ1²/θ2 (Box, Ann. Math. Stat. 25:290, 1954), with scipy's χ².
    cal, new, y, model, domain = fitted
    n, A = len(cal), 5
    Xc = cal - cal.mean(axis=0)
    T = model.transform(cal)
    E = Xc - T @ model.x_loadings_.T
    design = np.column_stack([np.ones(n), T])
    np.testing.assert_allclose(E, cal - design @ np.linalg.lstsq(design, cal, rcond=None)[0],
                               atol=1e-9)
    eig = np.clip(np.linalg.eigvalsh(E.T @ E / (n - A - 1)), 0, None) * (1 + (A + 1) / n)
    t1, t2 = np.sum(eig), np.sum(eig ** 2)
    res = domain.assess(new, model.predict(new))
    assert res.q_limit == pytest.approx(t2 / t1 * stats.chi2.ppf(0.95, t1 ** 2 / t2), rel=1e-8)
    assert (domain.q_limit_form_, domain.q_limit_g_, domain.q_limit_h_) == (
        "box", pytest.approx(t2 / t1, rel=1e-8), pytest.approx(t1 ** 2 / t2, rel=1e-8))
    E_new = (new - cal.mean(axis=0)) - model.transform(new) @ model.x_loadings_.T
    np.testing.assert_allclose(res.q, np.sum(E_new ** 2, axis=1), rtol=1e-9)
    np.testing.assert_array_equal(res.flags["q_residual"], res.q > res.q_limit)
    strict = ApplicabilityDomain(confidence=0.99).fit(cal, model, y)
    assert strict.q_limit_ == pytest.approx(t2 / t1 * stats.chi2.ppf(0.99, t1 ** 2 / t2), rel=1e-8)
    # F-ratio view (ASTM E1655-style, from memory): (n-A-1) Q / sum Q_cal vs F(1, n-A-1)
    np.testing.assert_allclose(res.q_f_ratio, (n - A - 1) * res.q / np.sum(E ** 2), rtol=1e-9)
    assert res.q_f_limit == pytest.approx(stats.f.ppf(0.95, 1, n - A - 1))
    by_f = ApplicabilityDomain(residual_test="f-ratio").fit(cal, model, y)
    np.testing.assert_array_equal(by_f.assess(new, model.predict(new)).flags["q_residual"],
                                  res.q_f_ratio > res.q_f_limit)


def test_flags_fire_for_out_of_space_samples(fitted):
    # source: definitions of the checks; a spectrum far along a calibration
    # score direction extrapolates, one with an added off-model shape has a
    # large residual, a predicted y beyond the calibration range is flagged
    cal, new, y, model, domain = fitted
    centre = cal.mean(axis=0)
    far = centre + 20 * (cal[0] - centre)
    odd = cal[1] + 50 * np.sqrt(domain.q_limit_) * np.eye(cal.shape[1])[7]
    X = np.vstack([cal[2], far, odd])
    y_pred = model.predict(X)
    res = domain.assess(X, y_pred)
    assert res.flag_names(0) == []
    assert {"leverage", "hotelling_t2", "nearest_neighbour"} <= set(res.flag_names(1))
    assert "q_residual" in res.flag_names(2)
    res_y = domain.assess(X[:1], np.array([y.max() + 1.0]))
    assert res_y.flag_names(0) == ["y_range"]
    assert set(res.flags) == set(FLAG_NAMES)
    assert res.records()[1]["flags"] == res.flag_names(1)


def test_state_round_trip_bit_identical(fitted):
    # source: artifact contract (plain arrays + JSON restore the checks exactly)
    import json
    cal, new, y, model, domain = fitted
    arrays = {k: v.copy() for k, v in domain.state_arrays().items()}
    meta = json.loads(json.dumps(domain.state_json()))
    again = ApplicabilityDomain.from_state(arrays, meta)
    a, b = domain.assess(new, model.predict(new)), again.assess(new, model.predict(new))
    for name in ("leverage", "t2", "q", "nn_distance", "q_f_ratio"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert (a.q_limit, a.t2_limit, a.nn_limit) == (b.q_limit, b.t2_limit, b.nn_limit)
    assert again.q_limit_record() == domain.q_limit_record()


def test_artifact_state_without_the_limit_form_loads_as_the_old_form(fitted):
    # source: artifact contract. State written before the Q-limit form was recorded
    # (residual_test named "jackson-mudholkar", no form fields) keeps its stored limit and
    # flags, and is described as Jackson-Mudholkar on unscaled fitted residuals, with
    # h0 recomputed from the stored eigenvalues (Jackson & Mudholkar 1979 need h0 > 0).
    import json
    cal, new, y, model, domain = fitted
    meta = json.loads(json.dumps(domain.state_json()))
    for key in ("q_limit_method", "q_residual_scale", "q_limit_form", "q_theta_source",
                "q_limit_note"):
        del meta[key]
    meta["residual_test"] = "jackson-mudholkar"
    old = ApplicabilityDomain.from_state(domain.state_arrays(), meta)
    record = old.q_limit_record()
    assert record["form"] == "jackson-mudholkar" and "unscaled" in record["theta_source"]
    assert "before the limit form was recorded" in record["note"]
    assert old.q_limit_ == domain.q_limit_ and old.residual_test == "q-limit"
    eig = domain.residual_eigenvalues_
    t1, t2, t3 = (np.sum(eig ** i) for i in (1, 2, 3))
    assert record["h0"] == pytest.approx(1 - 2 * t1 * t3 / (3 * t2 ** 2), rel=1e-10)
    assert ("not valid" in record["note"]) == (record["h0"] <= 0)


def test_rank_deficient_model_uses_stable_components():
    # source: numpy.linalg.matrix_rank; X built from 3 sklearn-generated
    # directions has rank 3 after centring, so at most 3 components carry scores
    from sklearn.datasets import make_regression
    B, y = make_regression(n_samples=30, n_features=3, random_state=2)
    W, _ = make_regression(n_samples=3, n_features=50, random_state=3)
    X = B @ W
    assert np.linalg.matrix_rank(X - X.mean(0)) == 3
    model = PLSRegressor(6).fit(X, y)
    domain = ApplicabilityDomain().fit(X, model, y)
    assert domain.n_components_ == model.n_stable_components_ <= 3
    assert np.all(np.isfinite(domain.assess(X, model.predict(X)).t2))
