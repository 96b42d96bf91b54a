"""A small registry with the whole chain a trace follows, built once per module.

spectra → selection run → reference results (one corrected) → calibration set →
model → validation → signed approval and deployment → QC signal → predictions.
Everything goes through the services except the selection run and the signed
approval, which are recorded here the way a service records them (rows plus an
audit event vouching for their hashes) because those services live elsewhere.
"""

from __future__ import annotations

import shutil
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
from sqlmodel import select

from registry.lifecycle.permissions import Action
from registry.lifecycle.signatures import signed_content_hash
from registry.lineage.content_hashes import signature_hash
from registry.services import calibration, models, predictions, references
from registry.services.context import audit
from registry.services import intake
from registry.storage.engine import make_engine, session_scope, upgrade
from registry.storage.models import (CalibrationSet, Deployment, Instrument, ModelStateChange,
                                     ModelVersion, QCResult, RevalidationTrigger, Sample,
                                     SelectionPick, SelectionRun, Signature, ValidationRecord)
from registry.storage.types import utcnow
from seed_demo.synthetic import generate_population, reference_noise
from tests.conftest import fresh_pg_database, populate_basics
from tests.factories import write_population_csv, write_reference_csv

N_SAMPLES = 36
N_PICKED = 10


def _selection_run(session, actor, sample_ids: list[int]) -> SelectionRun:
    run = SelectionRun(user_id=actor.id, method="kennard_stone", parameters={"k": len(sample_ids)},
                       property_codes=["RON"], pool_sha256="0" * 64, pool_size=N_SAMPLES,
                       state="open")
    session.add(run)
    session.flush()
    for rank, sid in enumerate(sample_ids, 1):
        session.add(SelectionPick(run_id=run.id, sample_id=sid, rank=rank, cost=150.0,
                                  cumulative_cost=150.0 * rank, reason="maximin distance"))
    session.flush()
    audit(session, actor, Action.SELECTION_RUN, entity_type="selection_run", entity_id=run.id,
          data={"method": run.method, "samples": sample_ids})
    return run


def _sign_approve_deploy(session, reviewer, manager, mv: ModelVersion) -> Signature:
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    rec = session.exec(select(ValidationRecord).where(ValidationRecord.model_version_id == mv.id)
                       .order_by(ValidationRecord.id.desc())).first()
    parts = {"artifact_sha256": mv.artifact_sha256, "validation_record_sha256": rec.sha256,
             "calibration_set_sha256": cs.sha256}
    sig = Signature(user_id=reviewer.id, meaning="approved as reviewer", reason="meets criteria",
                    signed_at=utcnow(), entity_type="model_version", entity_id=mv.id,
                    signed_parts=parts, signed_sha256=signed_content_hash(parts))
    session.add(sig)
    session.flush()
    for to_state in ("in_review", "approved"):
        session.add(ModelStateChange(model_version_id=mv.id, from_state=mv.state, to_state=to_state,
                                     user_id=reviewer.id, reason="review",
                                     signature_id=sig.id if to_state == "approved" else None))
        mv.state = to_state
    session.add(mv)
    session.flush()
    audit(session, reviewer, Action.MODEL_APPROVE, entity_type="model_version", entity_id=mv.id,
          hashes={"signature": [(sig.id, signature_hash(sig))]})
    inst = session.exec(select(Instrument)).first()
    session.add(ModelStateChange(model_version_id=mv.id, from_state="approved", to_state="active",
                                 user_id=manager.id, reason="deploy"))
    mv.state = "active"
    mv.last_validated_at = mv.last_validated_at or utcnow()
    session.add(mv)
    session.add(Deployment(model_version_id=mv.id, instrument_id=inst.id,
                           deployed_by_id=manager.id))
    session.flush()
    audit(session, manager, Action.MODEL_ACTIVATE, entity_type="model_version", entity_id=mv.id)
    return sig


def build_lineage_registry(url: str, tmp: Path) -> dict:
    """Build the registry at ``url`` (already migrated); returns what the tests look for."""
    engine = make_engine(url)
    actors = populate_basics(engine)
    pop = generate_population(N_SAMPLES, family="gasoline", seed=11)
    csv_path = tmp / "spectra.csv"
    ids = write_population_csv(csv_path, pop, "L", "PREM95", replicates=2)
    ron = reference_noise("RON", pop.properties["RON"].to_numpy(), np.random.default_rng(11))
    ref_path = tmp / "ron.csv"
    write_reference_csv(ref_path, ids, ron, "RON", "ASTM D2699")
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [csv_path], instrument="IR-100")
    with session_scope(engine) as s:
        picked = [s.exec(select(Sample.id).where(Sample.external_id == e)).one()
                  for e in ids[:N_PICKED]]
        run = _selection_run(s, actors["lab_manager"], picked)
        run_id = run.id
    with session_scope(engine) as s:
        summary = references.import_references(s, actors["analyst"], ref_path)
        first_result = summary.result_ids[3]
    with session_scope(engine) as s:
        corrected = references.correct_reference(s, actors["analyst"], first_result,
                                                 round(float(ron[3]) + 0.1, 3), "transcription")
        corrected_id = corrected.id
    with session_scope(engine) as s:
        cs = calibration.create_calibration_set(s, actors["lab_manager"], "RON-T",
                                                property_code="RON", grade_code="PREM95",
                                                all_referenced=True, validation="duplex:0.25")
    with session_scope(engine) as s:
        mv = models.train_model_version(s, actors["analyst"], "RON-T", max_components=6)
    with session_scope(engine) as s:
        models.validate_model(s, actors["reviewer"], mv.label)
    with session_scope(engine) as s:
        mv = s.get(ModelVersion, mv.id)
        sig = _sign_approve_deploy(s, actors["reviewer"], actors["lab_manager"], mv)
        inst = s.exec(select(Instrument)).first()
        qc = QCResult(instrument_id=inst.id, model_version_id=mv.id, property_id=cs.property_id,
                      material="QC-A", known_value=95.0, measured_value=96.4,
                      measured_at=utcnow() - timedelta(minutes=5), user_id=actors["analyst"].id,
                      signals=["beyond_3_sigma"])
        s.add(qc)
        s.add(RevalidationTrigger(model_version_id=mv.id, kind="qc_signal",
                                  detail={"instrument": "IR-100", "rule": "beyond_3_sigma"},
                                  raised_at=utcnow() - timedelta(minutes=5)))
        s.flush()
        audit(s, actors["analyst"], Action.QC_ADD, entity_type="qc_result", entity_id=qc.id)
        sig_id = sig.id
    with session_scope(engine) as s:
        batch = predictions.predict(s, actors["analyst"], mv.label, spectrum_ids=[1, 3, 5])
    engine.dispose()
    return {"ids": ids, "calset_id": cs.id, "model": mv.label, "model_id": mv.id,
            "prediction_ids": [p["id"] for p in batch.predictions], "run_id": run_id,
            "corrected_from": first_result, "corrected_to": corrected_id, "signature_id": sig_id,
            "actors": actors}


@pytest.fixture(scope="module")
def built_sqlite(tmp_path_factory):
    """A built SQLite registry file (never modified: tests copy it)."""
    tmp = tmp_path_factory.mktemp("lineage")
    path = tmp / "built.db"
    url = f"sqlite:///{path}"
    upgrade(url)
    info = build_lineage_registry(url, tmp)
    return path, info


@pytest.fixture
def lineage_sqlite(built_sqlite, tmp_path):
    """(url, info) of a private copy of the built registry, free to tamper with."""
    src, info = built_sqlite
    dst = tmp_path / "copy.db"
    for suffix in ("", "-wal", "-shm"):
        if Path(f"{src}{suffix}").exists():
            shutil.copy(f"{src}{suffix}", f"{dst}{suffix}")
    return f"sqlite:///{dst}", info


@pytest.fixture(scope="module")
def lineage_pg(tmp_path_factory):
    """(url, info) of the same registry on a fresh PostgreSQL database (shared by the module)."""
    url, drop = fresh_pg_database()
    upgrade(url)
    info = build_lineage_registry(url, tmp_path_factory.mktemp("lineage_pg"))
    yield url, info
    from registry.storage.engine import dispose_engines

    dispose_engines()
    drop()
