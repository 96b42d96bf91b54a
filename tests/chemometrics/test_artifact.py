"""Model artifacts: bytes round trip, hash check, train_model."""

import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression

from registry.chemometrics import TrainedModel, train_model
from registry.chemometrics.container import pack, sha256_hex, unpack
from registry.errors import FormatError, InputError, IntegrityError

RECIPE = [{"step": "region", "keep": [[950, 1550]]},
          {"step": "savgol", "window_length": 15, "polyorder": 2, "deriv": 1},
          {"step": "msc"}]


@pytest.fixture(scope="module")
def trained(fermentation):
    X, y, axis = fermentation
    return train_model(X, y, axis, RECIPE, max_components=6, folds=7,
                       metadata={"property": "glucose", "unit": "g/L"})


def test_loaded_model_predicts_bit_identically(trained, fermentation_online):
    # source: artifact contract (plain arrays, no pickle, identical output)
    blob = trained.to_bytes()
    assert blob == trained.to_bytes()  # deterministic bytes, stable hash
    loaded = TrainedModel.from_bytes(blob, trained.sha256)
    y1, d1 = trained.predict(fermentation_online)
    y2, d2 = loaded.predict(fermentation_online)
    np.testing.assert_array_equal(y1, y2)
    for name in ("leverage", "t2", "q", "nn_distance"):
        np.testing.assert_array_equal(getattr(d1, name), getattr(d2, name))
    assert d1.flag_lists() == d2.flag_lists()
    assert loaded.metadata == trained.metadata and loaded.recipe == trained.recipe
    np.testing.assert_array_equal(loaded.cv.rmsecv, trained.cv.rmsecv)
    assert loaded.cv.selected_components == trained.cv.selected_components
    assert loaded.to_bytes() == blob


def test_artifact_from_before_the_q_limit_form_was_recorded_still_loads(trained,
                                                                        fermentation_online):
    # source: artifact contract. An artifact whose diagnostics lack the Q-limit form (and
    # name the Q test "jackson-mudholkar", as they were written then) loads, predicts and
    # flags with its stored limit, and says the form is assumed
    from registry.chemometrics.artifact import q_limit_of
    arrays, doc = unpack(trained.to_bytes(), trained.sha256)
    for key in ("q_limit_method", "q_residual_scale", "q_limit_form", "q_theta_source",
                "q_limit_note"):
        del doc["diagnostics"][key]
    doc["diagnostics"]["residual_test"] = "jackson-mudholkar"
    old_blob = pack(arrays, doc)
    old = TrainedModel.from_bytes(old_blob, sha256_hex(old_blob))
    _, d_now = trained.predict(fermentation_online)
    _, d_old = old.predict(fermentation_online)
    assert d_old.q_limit == d_now.q_limit and d_old.flag_lists() == d_now.flag_lists()
    record = q_limit_of(old_blob, sha256_hex(old_blob))
    assert record["form"] == "jackson-mudholkar" and "form assumed" in record["note"]
    assert q_limit_of(trained.to_bytes(), trained.sha256)["form"] == "box"
    assert q_limit_of(old_blob, trained.sha256) is None  # does not verify: not read


def test_tampering_any_byte_is_detected(trained):
    # source: SHA-256 (hashlib) over the whole artifact
    blob = trained.to_bytes()
    digest = sha256_hex(blob)
    for position in (0, 20, len(blob) // 2, len(blob) - 1):
        bad = bytearray(blob)
        bad[position] ^= 0x01
        with pytest.raises(IntegrityError):
            TrainedModel.from_bytes(bytes(bad), digest)
    with pytest.raises(InputError):
        TrainedModel.from_bytes(blob, "")


def test_container_refuses_malformed_bytes():
    # bytes whose hash matches but whose structure is wrong are refused
    blob = pack({"a": np.arange(3.0)}, {"k": 1})
    arrays, doc = unpack(blob, sha256_hex(blob))
    np.testing.assert_array_equal(arrays["a"], np.arange(3.0))
    assert doc == {"k": 1}
    for bad in (b"XXXXXXXX" + blob[8:], blob[:-8], blob + b"\0" * 8):
        with pytest.raises(FormatError):
            unpack(bad, sha256_hex(bad))
    with pytest.raises(FormatError, match="dtype"):
        pack({"o": np.array(["text"])}, {})


def test_train_model_final_fit_equals_sklearn(trained, fermentation):
    # source: scikit-learn PLSRegression(scale=False) on the same preprocessed
    # spectra with the selected number of components
    X, y, axis = fermentation
    A = trained.n_components
    X_pre = trained.preprocessor.transform(X)
    ref = PLSRegression(A, scale=False).fit(X_pre, y)
    y_pred, diag = trained.predict(X)
    np.testing.assert_allclose(y_pred, ref.predict(X_pre).ravel(), rtol=1e-8)
    assert trained.metadata["n_components"] == A == trained.cv.selected_components
    assert trained.cv.extra["preprocessing_in_folds"] is True  # MSC is data-dependent
    assert diag.n_samples == len(y)


def test_train_model_caps_components_and_checks_recipe_first(fermentation):
    X, y, axis = fermentation
    model = train_model(X, y, axis, [{"step": "savgol", "window_length": 9, "polyorder": 2,
                                      "deriv": 1}], max_components=50, folds=7)
    # 21 samples, 7 folds of 3: 18 training samples allow at most 17 components
    assert model.cv.max_components == 17 == model.metadata["max_components"]
    assert model.cv.extra["preprocessing_in_folds"] is False
    with pytest.raises(InputError) as info:
        train_model(X, y, axis, [{"step": "savgol", "window_length": 8, "polyorder": 2}])
    assert info.value.field == "steps[0].window_length"
    with pytest.raises(InputError, match="points on the model axis"):
        model.predict(X[:, :-3])
