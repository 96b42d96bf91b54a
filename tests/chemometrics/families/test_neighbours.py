"""Nearest-neighbour look-up against scikit-learn's KNeighborsRegressor, on the
fermentation mid-IR spectra shipped with chemotools."""

import numpy as np
import pytest
from sklearn.decomposition import PCA
from sklearn.neighbors import KNeighborsRegressor, NearestNeighbors

from registry.chemometrics.families import (
    NeighbourLookup,
    family_from_bytes,
    family_sha256,
    family_to_bytes,
)
from registry.errors import InputError


@pytest.fixture(scope="module")
def data(fermentation, fermentation_online):
    X, y, axis = fermentation
    keep = (axis >= 950) & (axis <= 1550)  # the sugar region
    cal, new = X[:, keep], fermentation_online[:, keep]
    return cal, y, np.vstack([new, cal[::4]])


def assert_matches_sklearn(model, reference, cal, y, queries, space=lambda X: X):
    """``space`` maps spectra to the reference's space (identity, or sklearn PCA scores)."""
    reference.fit(space(cal), y)
    ref_q = space(queries)
    res = model.check(queries)
    given_value = ~np.isnan(res.y_pred)
    assert given_value.any() and (~given_value).any()  # both cases occur in this data
    np.testing.assert_allclose(res.y_pred[given_value], reference.predict(ref_q)[given_value],
                               rtol=1e-10)
    ref_dist, ref_idx = reference.kneighbors(ref_q)
    np.testing.assert_array_equal(res.values["neighbour_index"], ref_idx)
    np.testing.assert_allclose(res.values["neighbour_distance"], ref_dist, rtol=1e-8)
    np.testing.assert_array_equal(res.values["neighbour_value"], y[ref_idx])
    np.testing.assert_array_equal(res.flags["nearest_neighbour"],
                                  ref_dist[:, 0] > model.distance_limit_)
    return res


@pytest.mark.parametrize("k, weights", [(1, "distance"), (3, "distance"), (4, "uniform")])
def test_euclidean_on_spectra_equals_kneighbors_regressor(data, k, weights):
    # source: sklearn.neighbors.KNeighborsRegressor (Euclidean) where a value is given;
    # the flag where it is not. Ball tree: it computes each distance directly, whereas
    # sklearn's brute force expands ‖a‖² + ‖b‖² − 2a·b and returns 2e-7 instead of 0
    # for a spectrum and its own copy
    cal, y, queries = data
    model = NeighbourLookup(n_neighbors=k, weights=weights).fit(cal, y)
    ref = KNeighborsRegressor(n_neighbors=k, weights=weights, algorithm="ball_tree")
    res = assert_matches_sklearn(model, ref, cal, y, queries)
    # calibration spectra look themselves up: distance 0, their own value
    if weights == "distance":
        np.testing.assert_allclose(res.y_pred[-6:], y[::4], rtol=1e-12)
    rec = res.records()[0]
    assert len(rec["neighbour_index"]) == k and rec["distance_limit"] == model.distance_limit_


@pytest.mark.parametrize("k", [1, 3])
def test_mahalanobis_on_pca_scores_equals_kneighbors_regressor(data, k):
    # source: sklearn PCA scores + KNeighborsRegressor(metric="mahalanobis",
    # VI = inverse covariance of the calibration scores)
    cal, y, queries = data
    model = NeighbourLookup(n_neighbors=k, space="scores", n_components=4).fit(cal, y)
    pca = PCA(n_components=4).fit(cal)
    VI = np.linalg.inv(np.cov(pca.transform(cal), rowvar=False))
    ref = KNeighborsRegressor(n_neighbors=k, weights="distance", algorithm="brute",
                              metric="mahalanobis", metric_params={"VI": VI})
    assert_matches_sklearn(model, ref, cal, y, queries, space=pca.transform)


def test_default_limit_is_largest_nearest_neighbour_distance(data):
    # source: sklearn NearestNeighbors on the calibration set, second neighbour (the
    # first is the sample itself) — the rule of the diagnostics' nearest-neighbour check
    cal, y, _ = data
    dist, _ = NearestNeighbors(n_neighbors=2, algorithm="ball_tree").fit(cal).kneighbors(cal)
    limit = NeighbourLookup().fit(cal, y).distance_limit_
    assert limit == pytest.approx(dist[:, 1].max(), rel=1e-9)
    given = NeighbourLookup(distance_limit=1e9).fit(cal, y)
    assert not np.isnan(given.predict(cal)).any()


def test_spread_and_state_round_trip(data):
    # source: artifact contract (plain arrays + JSON, hash checked on load)
    cal, y, queries = data
    for model in (NeighbourLookup(n_neighbors=3).fit(cal, y),
                  NeighbourLookup(n_neighbors=2, space="scores",
                                  explained_variance=0.999).fit(cal, y)):
        res = model.check(queries)
        values = res.values["neighbour_value"]
        np.testing.assert_array_equal(res.values["neighbour_range"], values.max(1) - values.min(1))
        loaded, _, _ = family_from_bytes(family_to_bytes(model), family_sha256(model))
        assert loaded.check(queries).records() == res.records()
        assert family_to_bytes(loaded) == family_to_bytes(model)


def test_bad_settings_are_refused(data):
    cal, y, _ = data
    with pytest.raises(InputError) as err:
        NeighbourLookup(n_neighbors=50).fit(cal, y)
    assert err.value.field == "n_neighbors"
    with pytest.raises(InputError) as err:
        NeighbourLookup(space="raw").fit(cal, y)
    assert err.value.field == "space"
    with pytest.raises(InputError) as err:
        NeighbourLookup().fit(cal, y).predict(cal[:, :10])
    assert err.value.field == "X"
