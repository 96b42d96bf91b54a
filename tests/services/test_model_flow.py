"""Calibration set → model → validation → prediction through the service layer."""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from registry.chemometrics import TrainedModel
from registry.errors import IntegrityError
from registry.services import calibration, models, predictions
from registry.storage.engine import session_scope
from registry.storage.models import CalibrationMember, ModelVersion
from tests.factories import referenced_registry


@pytest.fixture
def trained(registry, tmp_path):
    engine, actors = registry
    info = referenced_registry(engine, actors, tmp_path, n=80)
    with session_scope(engine) as s:
        cs = calibration.create_calibration_set(s, actors["lab_manager"], "RON-A", property_code="RON",
                                                grade_code="PREM95", all_referenced=True,
                                                validation="duplex:0.25")
    with session_scope(engine) as s:
        mv = models.train_model_version(s, actors["analyst"], "RON-A", max_components=12)
    return engine, actors, info, cs, mv


def test_calibration_set_is_frozen_with_hash_and_split(trained):
    engine, actors, info, cs, mv = trained
    assert cs.n_cal + cs.n_val == 80 and cs.n_val == 20
    with session_scope(engine) as s:
        members = s.exec(select(CalibrationMember).where(CalibrationMember.set_id == cs.id)).all()
        from registry.lineage.content_hashes import calibration_set_hash

        assert calibration_set_hash(cs, list(members)) == cs.sha256


def test_model_trains_validates_and_predicts(trained):
    engine, actors, info, cs, mv = trained
    assert mv.state == "draft" and 1 <= mv.n_components <= 12
    assert len(mv.cv["rmsecv"]) == 12
    # The synthetic RON carries engine-rating noise σ = r/2.77 (ISO 5725-6), so RMSECV
    # cannot be far below it and a working model must be well below the RON spread.
    rmsecv = mv.cv["rmsecv"][mv.n_components - 1]
    assert 0.05 < rmsecv < 0.5 * float(np.std(info["ron"]))
    with session_scope(engine) as s:
        rec = models.validate_model(s, actors["reviewer"], mv.label)
        assert rec.n == 20
    with session_scope(engine) as s:
        fresh = s.get(ModelVersion, mv.id)
        assert fresh.state == ("validated" if rec.passed else "draft")
        spectrum_ids = list(range(1, 6))
        batch = predictions.predict(s, actors["analyst"], mv.label, spectrum_ids=spectrum_ids)
    assert len(batch.predictions) == 5
    for p in batch.predictions:
        assert "not_in_service" in p["flags"]  # a draft/validated model is not deployed yet
        assert abs(p["value"] - info["ron"][p["spectrum_id"] - 1]) < 2.0


def test_loaded_artifact_predicts_bit_identically_and_detects_tampering(trained):
    engine, actors, info, cs, mv = trained
    a = TrainedModel.from_bytes(mv.artifact, mv.artifact_sha256)
    b = TrainedModel.from_bytes(bytes(mv.artifact), mv.artifact_sha256)
    X = info["population"].spectra[:7]
    assert np.array_equal(a.predict(X)[0], b.predict(X)[0])
    broken = bytearray(mv.artifact)
    broken[len(broken) // 2] ^= 0x01
    with pytest.raises(IntegrityError):
        TrainedModel.from_bytes(bytes(broken), mv.artifact_sha256)


def test_spectra_on_another_axis_are_resampled_or_refused(trained, tmp_path):
    """A spectrum on a finer grid covering the model axis is interpolated onto it (linear;
    checked against numpy.interp); one that does not cover the axis is refused."""
    from registry.services import intake
    from registry.spectra.formats import write_csv_spectra
    from registry.spectra.record import SpectrumRecord

    engine, actors, info, cs, mv = trained
    pop = info["population"]
    fine = np.linspace(pop.axis[0], pop.axis[-1], 2 * pop.axis.size - 1)
    y_fine = np.interp(fine, pop.axis, pop.spectra[0]).astype(np.float32)
    narrow = pop.axis[pop.axis > 1000.0]
    recs = [SpectrumRecord("FINE-1", fine, y_fine, metadata={"grade": "PREM95"})]
    write_csv_spectra(recs, tmp_path / "fine.csv", metadata_fields=["grade"])
    write_csv_spectra([SpectrumRecord("NARROW-1", narrow,
                                      pop.spectra[0][pop.axis > 1000.0].astype(np.float32),
                                      metadata={"grade": "PREM95"})],
                      tmp_path / "narrow.csv", metadata_fields=["grade"])
    with session_scope(engine) as s:
        fine_id = intake.import_spectra(s, actors["analyst"], [tmp_path / "fine.csv"],
                                        instrument="IR-100").spectrum_ids[0]
        narrow_id = intake.import_spectra(s, actors["analyst"], [tmp_path / "narrow.csv"],
                                          instrument="IR-100").spectrum_ids[0]
    with session_scope(engine) as s:
        out = predictions.predict(s, actors["analyst"], mv.label, spectrum_ids=[fine_id])
        original = predictions.predict(s, actors["analyst"], mv.label, spectrum_ids=[1])
    # Linear interpolation back onto the model grid reproduces the original points (float32).
    assert out.predictions[0]["value"] == pytest.approx(original.predictions[0]["value"], abs=1e-3)
    from registry.errors import InputError

    with pytest.raises(InputError, match="outside"):
        with session_scope(engine) as s:
            predictions.predict(s, actors["analyst"], mv.label, spectrum_ids=[narrow_id])
