"""A small registry with the whole chain a trace follows, built once per module.

spectra → selection run → reference results (one corrected) → calibration set →
model → validation → submitted, signed approval and signed activation → QC
signal → predictions. Everything goes through the services except the QC
result and its trigger, which are stored as rows (they carry no content hash).
Invented data from the synthetic generator; the tests check registry behaviour.
"""

from __future__ import annotations

import shutil
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
from sqlmodel import select

from registry.lifecycle.permissions import Action
from registry.services import (calibration, intake, lifecycle, models, predictions, references,
                               selection)
from registry.services.context import audit
from registry.storage.engine import make_engine, session_scope, upgrade
from registry.storage.models import Instrument, QCResult, RevalidationTrigger
from registry.storage.types import utcnow
from seed_demo.synthetic import generate_population, reference_noise
from tests.conftest import PASSWORD, fresh_pg_database, populate_basics
from tests.factories import accept_small_test_models, write_population_csv, write_reference_csv

N_SAMPLES = 80  # a 25 % Duplex split leaves the 20 validation samples a pass needs
N_PICKED = 10


def build_lineage_registry(url: str, tmp: Path) -> dict:
    """Build the registry at ``url`` (already migrated); returns what the tests look for."""
    engine = make_engine(url)
    actors = populate_basics(engine)
    pop = generate_population(N_SAMPLES, family="gasoline", seed=3)
    csv_path = tmp / "spectra.csv"
    ids = write_population_csv(csv_path, pop, "L", "PREM95", replicates=2)
    ron = reference_noise("RON", pop.properties["RON"].to_numpy(), np.random.default_rng(3))
    ref_path = tmp / "ron.csv"
    write_reference_csv(ref_path, ids, ron, "RON", "ASTM D2699")
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [csv_path], instrument="IR-100")
    with session_scope(engine) as s:
        run = selection.run_selection(s, actors["lab_manager"], property_codes=["RON"],
                                      grade="PREM95", method="kennard-stone", n=N_PICKED)
        run_id = run.run.id
    with session_scope(engine) as s:
        summary = references.import_references(s, actors["analyst"], ref_path)
        first_result = summary.result_ids[3]
    with session_scope(engine) as s:
        corrected = references.correct_reference(s, actors["analyst"], first_result,
                                                 round(float(ron[3]) + 0.1, 3), "transcription")
        corrected_id = corrected.id
    accept_small_test_models(engine, actors)
    with session_scope(engine) as s:
        cs = calibration.create_calibration_set(s, actors["lab_manager"], "RON-T",
                                                property_code="RON", grade_code="PREM95",
                                                all_referenced=True, validation="duplex:0.25")
    with session_scope(engine) as s:
        mv = models.train_model_version(s, actors["analyst"], "RON-T", max_components=5)
    with session_scope(engine) as s:
        rec = models.validate_model(s, actors["reviewer"], mv.label)
        assert rec.passed, rec.reasons
    with session_scope(engine) as s:
        lifecycle.submit_model(s, actors["analyst"], mv.label, "ready for review")
    with session_scope(engine) as s:
        sig_id = lifecycle.approve_model(s, actors["reviewer"], mv.label, password=PASSWORD,
                                         reason="meets the acceptance criteria").signature.id
    with session_scope(engine) as s:
        lifecycle.activate_model(s, actors["lab_manager"], mv.label, instrument="IR-100",
                                 password=PASSWORD, reason="into service")
    with session_scope(engine) as s:
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
