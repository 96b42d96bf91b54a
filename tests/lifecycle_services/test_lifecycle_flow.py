"""Submit → approve (signed) → activate → supersede/retire through the services.

Sources beside the checks: the lifecycle requirements in tests/lifecycle/brief.py;
21 CFR Part 11 §11.50 (a signature shows signer, date and time, and meaning);
SHA-256 as computed by Python's hashlib (FIPS 180-4).
"""

from __future__ import annotations

import hashlib
import json

import pytest
from sqlalchemy import text
from sqlmodel import select

from registry.errors import (AuthenticationError, InputError, IntegrityError, PermissionDenied,
                             StateError)
from registry.lineage.verify import verify_registry
from registry.services import admin, intake, lifecycle
from registry.services.context import Actor
from registry.storage.engine import session_scope
from registry.storage.models import (CalibrationSet, Deployment, ModelStateChange, ModelVersion,
                                     Signature, ValidationRecord)
from seed_demo.synthetic import generate_population
from tests.conftest import PASSWORD
from tests.factories import write_population_csv
from tests.lifecycle_services import steps


def _model(reg, label) -> ModelVersion:
    with session_scope(reg.engine) as s:
        return s.exec(select(ModelVersion).where(ModelVersion.label == label)).one()


def test_reviewer_approves_with_a_signature_over_the_three_hashes(reg):
    steps.submit(reg, reg.v1)
    assert _model(reg, reg.v1).state == "in_review"
    moved = steps.approve(reg, reg.v1)
    assert (moved.from_state, moved.state) == ("in_review", "approved")
    with session_scope(reg.engine) as s:
        mv = s.exec(select(ModelVersion).where(ModelVersion.label == reg.v1)).one()
        cs = s.get(CalibrationSet, mv.calibration_set_id)
        rec = s.exec(select(ValidationRecord).where(ValidationRecord.model_version_id == mv.id)).one()
        sig = s.get(Signature, moved.signature.id)
        change = s.exec(select(ModelStateChange).where(ModelStateChange.signature_id == sig.id)).one()
        # §11.50: signer, date and time, meaning; the registry adds the reason and what was signed.
        assert mv.state == "approved"
        assert sig.user_id == reg.actors["reviewer"].id
        assert sig.meaning == "approved as reviewer"
        assert sig.reason == "meets the acceptance criteria"
        assert sig.signed_at.tzinfo is not None and sig.signed_at.utcoffset().total_seconds() == 0
        assert (change.from_state, change.to_state) == ("in_review", "approved")
        # The artifact part is the SHA-256 of the stored bytes (hashlib as reference).
        assert sig.signed_parts == {"artifact_sha256": hashlib.sha256(mv.artifact).hexdigest(),
                                    "validation_record_sha256": rec.sha256,
                                    "calibration_set_sha256": cs.sha256}
        # Signed hash = SHA-256 of the sorted, space-free JSON of the parts (the registry's
        # documented canonical form), recomputed here with json + hashlib.
        text_ = json.dumps(sig.signed_parts, sort_keys=True, separators=(",", ":"))
        assert sig.signed_sha256 == hashlib.sha256(text_.encode()).hexdigest()
        assert lifecycle.signature_status(s, sig) == "intact"
        # The audit chain vouches for the signature row.
        assert verify_registry(s).intact


def test_the_author_cannot_approve_even_holding_the_reviewer_role(reg):
    steps.submit(reg, reg.v2, "dual")
    before = reg.counts()
    with session_scope(reg.engine) as s, pytest.raises(PermissionDenied, match="author"):
        lifecycle.approve_model(s, reg.actors["dual"], reg.v2, password=PASSWORD, reason="mine")
    assert reg.counts() == before
    assert _model(reg, reg.v2).state == "in_review"


def test_the_calibration_set_creator_cannot_approve(reg):
    steps.submit(reg, reg.v1)
    lena = reg.actors["lab_manager"]
    # the lab manager who froze the set, as if also holding the reviewer role
    as_reviewer = Actor(id=lena.id, name=lena.name, roles=frozenset({"lab_manager", "reviewer"}))
    before = reg.counts()
    with session_scope(reg.engine) as s, pytest.raises(PermissionDenied, match="calibration set"):
        lifecycle.approve_model(s, as_reviewer, reg.v1, password=PASSWORD, reason="x")
    assert reg.counts() == before


def test_only_the_author_submits(reg):
    before = reg.counts()
    with session_scope(reg.engine) as s, pytest.raises(PermissionDenied, match="only its author"):
        lifecycle.submit_model(s, reg.actors["lab_manager"], reg.v1)
    assert reg.counts() == before


def test_wrong_password_writes_nothing(reg):
    steps.submit(reg, reg.v1)
    before = reg.counts()
    with session_scope(reg.engine) as s, pytest.raises(AuthenticationError, match="signature"):
        lifecycle.approve_model(s, reg.actors["reviewer"], reg.v1, password="not-it", reason="ok")
    assert reg.counts() == before
    assert _model(reg, reg.v1).state == "in_review"


def test_illegal_moves_name_the_state_and_the_allowed_actions(reg):
    # Requirement: any other transition gives a clear error naming the current state and the
    # allowed ones.
    with session_scope(reg.engine) as s, pytest.raises(StateError) as err:
        lifecycle.approve_model(s, reg.actors["reviewer"], reg.v1, password=PASSWORD)
    assert "validated" in str(err.value) and "submit" in str(err.value)
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="is validated"):
        lifecycle.activate_model(s, reg.actors["lab_manager"], reg.v1, instrument="IR-100",
                                 password=PASSWORD)


def test_rejection_needs_a_reason_and_ends_the_version(reg):
    steps.submit(reg, reg.v1)
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="reason"):
        lifecycle.reject_model(s, reg.actors["reviewer"], reg.v1, password=PASSWORD, reason=" ")
    with session_scope(reg.engine) as s:
        moved = lifecycle.reject_model(s, reg.actors["reviewer"], reg.v1, password=PASSWORD,
                                       reason="bias at the high end")
        assert moved.signature.meaning == "rejected as reviewer" and moved.state == "rejected"
    assert _model(reg, reg.v1).state == "rejected"
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="final"):
        lifecycle.approve_model(s, reg.actors["reviewer"], reg.v1, password=PASSWORD)


def test_activation_records_who_deployed_what_where_when(reg):
    steps.approved(reg, reg.v1)
    moved = steps.activate(reg, reg.v1)
    with session_scope(reg.engine) as s:
        dep = s.get(Deployment, moved.deployment_id)
        mv = s.get(ModelVersion, dep.model_version_id)
        sig = s.get(Signature, dep.signature_id)
        assert mv.label == reg.v1 and mv.state == "active"
        assert dep.state == "active" and dep.deployed_by_id == reg.actors["lab_manager"].id
        assert dep.deployed_at.tzinfo is not None
        assert sig.meaning == "activated for use" and sig.user_id == dep.deployed_by_id
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="already active"):
        lifecycle.activate_model(s, reg.actors["lab_manager"], reg.v1, instrument="IR-100",
                                 password=PASSWORD)


def test_activating_a_new_version_supersedes_the_old_in_one_transaction(reg):
    steps.in_service(reg, reg.v1, instrument="IR-100")
    steps.activate(reg, reg.v1, "IR-200")
    steps.approved(reg, reg.v2, author="dual")
    steps.activate(reg, reg.v2, "IR-100")
    with session_scope(reg.engine) as s:
        v1 = s.exec(select(ModelVersion).where(ModelVersion.label == reg.v1)).one()
        deps = {d.instrument_id: d.state for d in s.exec(select(Deployment).where(
            Deployment.model_version_id == v1.id)).all()}
        # Still active on IR-200, so the version itself stays active.
        assert sorted(deps.values()) == ["active", "superseded"] and v1.state == "active"
    steps.activate(reg, reg.v2, "IR-200")
    with session_scope(reg.engine) as s:
        v1 = s.exec(select(ModelVersion).where(ModelVersion.label == reg.v1)).one()
        assert v1.state == "superseded"
        last = s.exec(select(ModelStateChange).where(ModelStateChange.model_version_id == v1.id)
                      .order_by(ModelStateChange.id.desc())).first()
        assert last.to_state == "superseded" and last.reason == f"superseded by {reg.v2}"
        assert last.user_id == reg.actors["lab_manager"].id
        # Requirement: only one active version per (property, grade, instrument).
        active = s.exec(select(Deployment).where(Deployment.state == "active")).all()
        assert sorted(d.instrument_id for d in active) == sorted({d.instrument_id for d in active})


def test_retire_on_one_instrument_then_everywhere(reg):
    steps.in_service(reg, reg.v1, instrument="IR-100")
    steps.activate(reg, reg.v1, "IR-200")
    with session_scope(reg.engine) as s:
        lifecycle.retire_model(s, reg.actors["lab_manager"], reg.v1, password=PASSWORD,
                               reason="instrument moved", instrument="IR-200")
    assert _model(reg, reg.v1).state == "active"
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="reason"):
        lifecycle.retire_model(s, reg.actors["lab_manager"], reg.v1, password=PASSWORD, reason="")
    with session_scope(reg.engine) as s:
        moved = lifecycle.retire_model(s, reg.actors["lab_manager"], reg.v1, password=PASSWORD,
                                       reason="replaced by the summer model")
        assert moved.signature.meaning == "retired from use" and moved.state == "retired"
    with session_scope(reg.engine) as s:
        mv = s.exec(select(ModelVersion).where(ModelVersion.label == reg.v1)).one()
        assert mv.state == "retired"
        assert all(d.state == "retired" and d.ended_at is not None for d in s.exec(
            select(Deployment).where(Deployment.model_version_id == mv.id)).all())


def _add_instrument(reg, serial, **kw):
    with session_scope(reg.engine) as s:
        admin.add_instrument(s, reg.actors["admin"], serial, site="Harbour Lab", **kw)


def test_deployment_checks_range_resolution_and_grade(reg):
    steps.approved(reg, reg.v1)
    _add_instrument(reg, "IR-NARROW", spectral_range="4000-1000")
    _add_instrument(reg, "IR-COARSE", resolution=8.0)
    _add_instrument(reg, "IR-REG")
    with session_scope(reg.engine) as s:
        admin.add_grade(s, reg.actors["admin"], "REG91", name="Regular gasoline")
    pop = generate_population(3, family="gasoline", seed=11)
    csv = reg.tmp / "regular.csv"
    write_population_csv(csv, pop, "REG", "REG91")
    with session_scope(reg.engine) as s:
        intake.import_spectra(s, reg.actors["analyst"], [csv], instrument="IR-REG")
    before = reg.counts()
    for serial, words in (("IR-NARROW", "cm⁻¹"), ("IR-COARSE", "coarser"),
                          ("IR-REG", "grade PREM95")):
        with session_scope(reg.engine) as s, pytest.raises(InputError, match=words) as err:
            lifecycle.activate_model(s, reg.actors["lab_manager"], reg.v1, instrument=serial,
                                     password=PASSWORD)
        assert err.value.field == "--instrument"
    assert reg.counts() == before
    # A new instrument with nothing measured yet may receive its first model (documented choice).
    _add_instrument(reg, "IR-NEW")
    steps.activate(reg, reg.v1, "IR-NEW")
    assert _model(reg, reg.v1).state == "active"


@pytest.mark.parametrize("tamper", ["calibration_member", "artifact", "validation_record"])
def test_signature_breaks_when_signed_content_changes_behind_the_registrys_back(reg, tamper):
    steps.submit(reg, reg.v1)
    signed_id = steps.approve(reg, reg.v1).signature.id
    mv = _model(reg, reg.v1)
    with reg.engine.begin() as conn:
        if tamper == "calibration_member":
            conn.execute(text("UPDATE calibration_member SET reference_value = reference_value + 0.1 "
                              "WHERE id = (SELECT MIN(id) FROM calibration_member WHERE set_id = :s)"),
                         {"s": mv.calibration_set_id})
        elif tamper == "artifact":
            blob = bytearray(mv.artifact)
            blob[len(blob) // 2] ^= 0x01
            conn.execute(text("UPDATE model_version SET artifact = :b WHERE id = :i"),
                         {"b": bytes(blob), "i": mv.id})
        else:
            conn.execute(text("UPDATE validation_record SET reasons = '[\"edited\"]' "
                              "WHERE model_version_id = :i"), {"i": mv.id})
    with session_scope(reg.engine) as s:
        sig = s.get(Signature, signed_id)
        check = lifecycle.check_signature(s, sig)
        assert lifecycle.signature_status(s, sig) == "broken"
        assert len(check.problems) == 1
        rows = lifecycle.model_signatures(s, reg.actors["auditor"], reg.v1)
        assert [r["status"] for r in rows] == ["broken"]
    # Nothing altered may be signed again: activation refuses to sign changed content.
    with session_scope(reg.engine) as s, pytest.raises(IntegrityError, match="no longer matches"):
        lifecycle.activate_model(s, reg.actors["lab_manager"], reg.v1, instrument="IR-100",
                                 password=PASSWORD)


def test_deactivated_signer_cannot_sign(reg):
    steps.submit(reg, reg.v1)
    with session_scope(reg.engine) as s:
        admin.deactivate_user(s, reg.actors["admin"], "rita")
    with session_scope(reg.engine) as s, pytest.raises(AuthenticationError):
        lifecycle.approve_model(s, reg.actors["reviewer"], reg.v1, password=PASSWORD)
