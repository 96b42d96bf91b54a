"""Model-version lifecycle: submit, approve, reject, activate on an instrument, retire.

Approving, rejecting, activating and retiring are electronically signed: the
signer re-enters their password, and the signature records who, the meaning,
the reason, the UTC time and the SHA-256 over the hashes of what was signed
(the model artifact, its latest passing validation record and its
calibration set), as 21 CFR Part 11 §11.50 asks of a signed record.
:func:`signature_status` recomputes those hashes from the stored rows, so a
change made behind the registry's back shows the signature as broken.

Every function checks the role table first, then the version's state and
the separation of duties, then the password, and only then writes; a refusal
at any step leaves the database unchanged.

Deployment choices (documented here because the rules leave them open):

* **Spectral range**: the model's axis (first to last wavenumber) must lie
  inside the instrument's window.
* **Resolution**: the instrument's resolution must be at least as fine as the
  coarsest resolution among the instruments that measured the calibration
  spectra (a finer one is fine: it can be degraded to match; a coarser one
  cannot be sharpened).
* **Product grade**: refused when the instrument has measured samples of
  other grades but none of the model's grade; allowed, and recorded as
  unchecked in the audit event, when the instrument has no graded spectra yet
  (a new instrument must be able to receive its first model).
* **One active version per (property, grade, instrument)**: activating a
  version ends the deployment of the version active there before, in the same
  transaction; a version left with no active deployment is superseded (a
  system move, recorded with the activating user and "superseded by ...").
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime

from sqlmodel import Session, select

from ..errors import InputError, IntegrityError, PermissionDenied, StateError
from ..lifecycle.permissions import Action
from ..lifecycle.signatures import SignatureRecord, signed_content_hash
from ..lifecycle.states import DeploymentState, LifecycleAction, ModelState, check_transition
from ..lineage.content_hashes import (artifact_hash, calibration_set_hash, signature_hash,
                                      validation_record_hash)
from ..storage.models import (CalibrationMember, CalibrationSet, Deployment, Grade, Instrument,
                              ModelVersion, Sample, Signature, SpectralAxis, Spectrum, User,
                              ValidationRecord)
from ..storage.bulk import in_blocks
from ..storage.types import utcnow
from .admin import get_instrument
from .auth import verify_signer
from .context import Actor, audit, authorize
from .models import get_model, record_state_change
from .revalidation import raise_input_change_triggers

ENTITY = "model_version"


# --------------------------------------------------------------------------- signed content

def latest_passing_record(session: Session, mv: ModelVersion) -> ValidationRecord | None:
    return session.exec(select(ValidationRecord).where(
        ValidationRecord.model_version_id == mv.id, ValidationRecord.passed == True)  # noqa: E712
        .order_by(ValidationRecord.id.desc())).first()


def _calset_members(session: Session, cs: CalibrationSet) -> list[CalibrationMember]:
    return list(session.exec(select(CalibrationMember).where(CalibrationMember.set_id == cs.id)).all())


def _parts_to_sign(session: Session, mv: ModelVersion) -> dict[str, str]:
    """The hashes a signature on ``mv`` covers, each checked against the stored content.

    Signing content that no longer matches its own recorded hash would vouch for
    an altered record, so that is refused.
    """
    rec = latest_passing_record(session, mv)
    if rec is None:
        raise StateError(f"model {mv.label} has no passing validation record; nothing to sign")
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    checks = [("model artifact", artifact_hash(bytes(mv.artifact)), mv.artifact_sha256),
              (f"validation record {rec.id}", validation_record_hash(rec), rec.sha256),
              (f"calibration set {cs.name}", calibration_set_hash(cs, _calset_members(session, cs)),
               cs.sha256)]
    for what, now, recorded in checks:
        if now != recorded:
            raise IntegrityError(f"cannot sign model {mv.label}: the {what} no longer matches "
                                 "its recorded hash")
    return {"artifact_sha256": mv.artifact_sha256, "validation_record_sha256": rec.sha256,
            "calibration_set_sha256": cs.sha256}


def _sign(session: Session, actor: Actor, mv: ModelVersion, action: LifecycleAction,
          reason: str) -> Signature:
    parts = _parts_to_sign(session, mv)
    record = SignatureRecord.sign(signer_id=actor.id, signer_name=actor.name, action=action,
                                  parts=parts, signed_at=utcnow())
    sig = Signature(user_id=actor.id, meaning=record.meaning, reason=reason,
                    signed_at=record.signed_at, entity_type=ENTITY, entity_id=mv.id,
                    signed_parts=parts, signed_sha256=record.content_hash)
    session.add(sig)
    session.flush()
    return sig


@dataclass(frozen=True)
class SignatureCheck:
    """Result of re-checking one signature against the records as stored now."""

    signature_id: int
    status: str  # "intact" or "broken"
    problems: list[str] = field(default_factory=list)


def check_signature(session: Session, sig: Signature) -> SignatureCheck:
    """Recompute what ``sig`` covers from the stored rows and compare.

    The artifact hash is taken over the stored bytes, the validation record's
    and calibration set's hashes are recomputed from their stored content (the
    record is found by the hash that was signed; a record whose stored hash was
    edited is not found and counts as changed).
    """
    problems = []
    parts = dict(sig.signed_parts or {})
    try:
        if signed_content_hash(parts) != sig.signed_sha256:
            problems.append("the signature's own record was altered (its parts no longer hash "
                            "to the signed SHA-256)")
    except InputError:
        problems.append("the signature's own record was altered (signed parts unreadable)")
    mv = session.get(ModelVersion, sig.entity_id) if sig.entity_type == ENTITY else None
    if mv is None:
        return SignatureCheck(sig.id, "broken", problems + [f"signed {sig.entity_type} "
                                                           f"{sig.entity_id} not found"])
    if artifact_hash(bytes(mv.artifact)) != parts.get("artifact_sha256"):
        problems.append(f"model artifact of {mv.label} changed")
    rec = session.exec(select(ValidationRecord).where(
        ValidationRecord.model_version_id == mv.id,
        ValidationRecord.sha256 == parts.get("validation_record_sha256", ""))).first()
    if rec is None or validation_record_hash(rec) != parts.get("validation_record_sha256"):
        problems.append(f"signed validation record of {mv.label} changed")
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    if cs is None or calibration_set_hash(cs, _calset_members(session, cs)) \
            != parts.get("calibration_set_sha256"):
        problems.append(f"calibration set of {mv.label} changed")
    return SignatureCheck(sig.id, "broken" if problems else "intact", problems)


def signature_status(session: Session, sig: Signature) -> str:
    """``"intact"`` if everything the signature covers still hashes as signed, else ``"broken"``."""
    return check_signature(session, sig).status


def model_signatures(session: Session, actor: Actor, label: str) -> list[dict]:
    """Every signature on a model version with its status now (for ``model signatures``)."""
    authorize(actor, Action.VIEW)
    mv = get_model(session, label)
    users = {u.id: u.name for u in session.exec(select(User)).all()}
    out = []
    for sig in session.exec(select(Signature).where(Signature.entity_type == ENTITY,
                                                    Signature.entity_id == mv.id)
                            .order_by(Signature.id)).all():
        chk = check_signature(session, sig)
        out.append({"id": sig.id, "signer": users.get(sig.user_id), "meaning": sig.meaning,
                    "reason": sig.reason, "signed_at": sig.signed_at,
                    "signed_sha256": sig.signed_sha256, "signed_parts": sig.signed_parts,
                    "status": chk.status, "problems": chk.problems})
    return out


# --------------------------------------------------------------------------- moves

@dataclass(frozen=True)
class SignedAs:
    """The electronic signature a move was made with."""

    id: int
    signer: str
    meaning: str
    reason: str
    signed_at: datetime
    signed_sha256: str
    signed_parts: dict[str, str]


@dataclass(frozen=True)
class MoveResult:
    """What every lifecycle move returns: the version's state before and after, the
    signature (None for a submission) and, for an activation, the new deployment."""

    label: str
    from_state: ModelState
    state: ModelState
    signature: SignedAs | None = None
    deployment_id: int | None = None


def _result(mv: ModelVersion, from_state: ModelState, actor: Actor, sig: Signature | None = None,
            deployment: Deployment | None = None) -> MoveResult:
    signed = None if sig is None else SignedAs(
        id=sig.id, signer=actor.name, meaning=sig.meaning, reason=sig.reason,
        signed_at=sig.signed_at, signed_sha256=sig.signed_sha256,
        signed_parts=dict(sig.signed_parts))
    return MoveResult(label=mv.label, from_state=from_state, state=mv.state, signature=signed,
                      deployment_id=deployment.id if deployment else None)


def _next_state(mv: ModelVersion, action: LifecycleAction) -> ModelState:
    """The state ``action`` leads to from the version's state (refused if not legal)."""
    return check_transition(mv.state, action, label=f"model {mv.label}")


def _refuse_by_name(session: Session, actor: Actor, mv: ModelVersion, action: LifecycleAction) -> None:
    """The four-eyes rule, refused in people's names (never internal ids)."""
    from .review import separation_refusal

    reason = separation_refusal(session, actor, mv, action)
    if reason is not None:
        raise PermissionDenied(reason)


def _require_reason(reason: str, what: str) -> str:
    reason = (reason or "").strip()
    if not reason:
        raise InputError(f"{what} needs a reason", field="--reason")
    return reason


def _signature_hashes(sig: Signature) -> dict[str, list]:
    return {"signature": [(sig.id, signature_hash(sig))]}


def submit_model(session: Session, actor: Actor, label: str, reason: str = "") -> MoveResult:
    """The author submits a validated version for review (no signature needed)."""
    authorize(actor, Action.MODEL_SUBMIT)
    mv = get_model(session, label)
    next_state = _next_state(mv, LifecycleAction.SUBMIT)
    _refuse_by_name(session, actor, mv, LifecycleAction.SUBMIT)
    if latest_passing_record(session, mv) is None:
        raise StateError(f"model {mv.label} has no passing validation record to submit")
    old = mv.state
    change = record_state_change(session, mv, next_state, actor, reason.strip())
    audit(session, actor, Action.MODEL_SUBMIT, entity_type=ENTITY, entity_id=mv.id,
          data={"label": mv.label, "from": old, "to": mv.state, "reason": change.reason})
    return _result(mv, old, actor)


def approve_model(session: Session, actor: Actor, label: str, *, password: str,
                  reason: str = "") -> MoveResult:
    """A reviewer who is neither the author nor the calibration-set creator signs approval."""
    authorize(actor, Action.MODEL_APPROVE)
    mv = get_model(session, label)
    next_state = _next_state(mv, LifecycleAction.APPROVE)
    _refuse_by_name(session, actor, mv, LifecycleAction.APPROVE)
    verify_signer(session, actor, password)
    return _signed_move(session, actor, mv, LifecycleAction.APPROVE, Action.MODEL_APPROVE,
                        next_state, (reason or "").strip())


def reject_model(session: Session, actor: Actor, label: str, *, password: str,
                 reason: str) -> MoveResult:
    """A reviewer ends a version with a signed reason; a fix is trained as a new version."""
    authorize(actor, Action.MODEL_REJECT)
    mv = get_model(session, label)
    next_state = _next_state(mv, LifecycleAction.REJECT)
    reason = _require_reason(reason, "a rejection")
    verify_signer(session, actor, password)
    return _signed_move(session, actor, mv, LifecycleAction.REJECT, Action.MODEL_REJECT,
                        next_state, reason)


def _signed_move(session: Session, actor: Actor, mv: ModelVersion, move: LifecycleAction,
                 action: Action, to_state: ModelState, reason: str) -> MoveResult:
    sig = _sign(session, actor, mv, move, reason)
    old = mv.state
    record_state_change(session, mv, to_state, actor, reason, signature_id=sig.id)
    audit(session, actor, action, entity_type=ENTITY, entity_id=mv.id,
          data={"label": mv.label, "from": old, "to": to_state, "reason": reason,
                "signature_id": sig.id, "meaning": sig.meaning,
                "signed_sha256": sig.signed_sha256},
          hashes=_signature_hashes(sig))
    return _result(mv, old, actor, sig)


# --------------------------------------------------------------------------- deployment

def _calibration_instruments(session: Session, mv: ModelVersion) -> list[Instrument]:
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    spectrum_ids = sorted({sid for m in _calset_members(session, cs) if m.role == "cal"
                           for sid in m.spectrum_ids})
    inst_ids: set[int] = set()
    for part in in_blocks(spectrum_ids):
        inst_ids.update(session.exec(select(Spectrum.instrument_id).where(
            Spectrum.id.in_(part)).distinct()).all())
    return [session.get(Instrument, i) for i in sorted(inst_ids)]


def check_compatibility(session: Session, mv: ModelVersion, inst: Instrument) -> dict:
    """Refuse (InputError naming ``--instrument``) an instrument the model cannot run on.

    Returns what was checked, for the audit event.
    """
    where = "--instrument"
    if not inst.active:
        raise InputError(f"instrument {inst.serial} is not active", field=where)
    axis = session.get(SpectralAxis, mv.axis_id)
    lo, hi = sorted((axis.first_x, axis.last_x))
    if lo < inst.range_low_cm1 or hi > inst.range_high_cm1:
        raise InputError(f"instrument {inst.serial} covers {inst.range_low_cm1:g}–"
                         f"{inst.range_high_cm1:g} cm⁻¹ but model {mv.label} needs {lo:g}–{hi:g} "
                         "cm⁻¹", field=where)
    cal_insts = _calibration_instruments(session, mv)
    needed = max((i.resolution_cm1 for i in cal_insts), default=None)
    if needed is not None and inst.resolution_cm1 > needed:
        raise InputError(f"instrument {inst.serial} resolves {inst.resolution_cm1:g} cm⁻¹, coarser "
                         f"than the {needed:g} cm⁻¹ the calibration spectra of {mv.label} were "
                         "measured at", field=where)
    grade_check = "not applicable (model for all grades)"
    if mv.grade_id is not None:
        measured = set(session.exec(select(Sample.grade_id).join(
            Spectrum, Spectrum.sample_id == Sample.id).where(
            Spectrum.instrument_id == inst.id, Sample.grade_id != None).distinct()).all())  # noqa: E711
        grade = session.get(Grade, mv.grade_id)
        if not measured:
            grade_check = f"unchecked: no graded spectra on {inst.serial} yet"
        elif mv.grade_id not in measured:
            codes = sorted(session.get(Grade, g).code for g in measured)
            raise InputError(f"model {mv.label} is for grade {grade.code} but instrument "
                             f"{inst.serial} measures {', '.join(codes)}", field=where)
        else:
            grade_check = f"{grade.code} measured on {inst.serial}"
    return {"axis_cm1": [lo, hi], "instrument_range_cm1": [inst.range_low_cm1, inst.range_high_cm1],
            "resolution_cm1": inst.resolution_cm1, "calibration_resolution_cm1": needed,
            "grade": grade_check}


def _active_deployments(session: Session, *, instrument_id: int | None = None,
                        model_version_id: int | None = None) -> list[Deployment]:
    q = select(Deployment).where(Deployment.state == DeploymentState.ACTIVE)
    if instrument_id is not None:
        q = q.where(Deployment.instrument_id == instrument_id)
    if model_version_id is not None:
        q = q.where(Deployment.model_version_id == model_version_id)
    return list(session.exec(q.order_by(Deployment.id)).all())


def activate_model(session: Session, actor: Actor, label: str, *, instrument: str, password: str,
                   reason: str = "") -> MoveResult:
    """Deploy an approved (or already active) version on one instrument, signed.

    The version active before for the same property and grade on that
    instrument is superseded there in the same transaction.
    """
    authorize(actor, Action.MODEL_ACTIVATE)
    mv = get_model(session, label)
    next_state = _next_state(mv, LifecycleAction.ACTIVATE)
    inst = get_instrument(session, instrument)
    if _active_deployments(session, instrument_id=inst.id, model_version_id=mv.id):
        raise StateError(f"model {mv.label} is already active on {inst.serial}")
    compat = check_compatibility(session, mv, inst)
    verify_signer(session, actor, password)
    reason = (reason or "").strip()
    sig = _sign(session, actor, mv, LifecycleAction.ACTIVATE, reason)
    now = utcnow()
    superseded = []
    for dep in _active_deployments(session, instrument_id=inst.id):
        old = session.get(ModelVersion, dep.model_version_id)
        if old.property_id != mv.property_id or old.grade_id != mv.grade_id:
            continue
        dep.state, dep.ended_at = DeploymentState.SUPERSEDED, now
        session.add(dep)
        session.flush()
        entry = {"label": old.label, "deployment_id": dep.id, "state_changed": False}
        if not _active_deployments(session, model_version_id=old.id):
            record_state_change(session, old, _next_state(old, LifecycleAction.SUPERSEDE), actor,
                                f"superseded by {mv.label}")
            entry["state_changed"] = True
        superseded.append(entry)
    deployment = Deployment(model_version_id=mv.id, instrument_id=inst.id,
                            state=DeploymentState.ACTIVE, deployed_at=now, deployed_by_id=actor.id,
                            signature_id=sig.id)
    session.add(deployment)
    session.flush()
    old_state = mv.state
    if next_state != mv.state:
        record_state_change(session, mv, next_state, actor,
                            reason or f"activated on {inst.serial}", signature_id=sig.id)
    audit(session, actor, Action.MODEL_ACTIVATE, entity_type=ENTITY, entity_id=mv.id,
          data={"label": mv.label, "from": old_state, "to": mv.state, "instrument": inst.serial,
                "deployment_id": deployment.id, "reason": reason, "signature_id": sig.id,
                "meaning": sig.meaning, "compatibility": compat, "superseded": superseded},
          hashes=_signature_hashes(sig))
    if old_state != mv.state:  # a new version of the property went into service
        raise_input_change_triggers(session, mv)
    return _result(mv, old_state, actor, sig, deployment)


def retire_model(session: Session, actor: Actor, label: str, *, password: str, reason: str,
                 instrument: str | None = None) -> MoveResult:
    """Take a version out of service, signed: everywhere, or on one instrument only.

    The version's state becomes ``retired`` once no active deployment is left.
    """
    authorize(actor, Action.MODEL_RETIRE)
    mv = get_model(session, label)
    next_state = _next_state(mv, LifecycleAction.RETIRE)
    reason = _require_reason(reason, "retiring a model version")
    deps = _active_deployments(session, model_version_id=mv.id)
    inst = None
    if instrument is not None:
        inst = get_instrument(session, instrument)
        deps = [d for d in deps if d.instrument_id == inst.id]
        if not deps:
            raise StateError(f"model {mv.label} is not active on {inst.serial}; nothing to retire "
                             "there")
    verify_signer(session, actor, password)
    sig = _sign(session, actor, mv, LifecycleAction.RETIRE, reason)
    now = utcnow()
    ended = []
    for dep in deps:
        dep.state, dep.ended_at = DeploymentState.RETIRED, now
        session.add(dep)
        ended.append(dep.id)
    session.flush()
    old_state = mv.state
    if not _active_deployments(session, model_version_id=mv.id):
        record_state_change(session, mv, next_state, actor, reason, signature_id=sig.id)
    audit(session, actor, Action.MODEL_RETIRE, entity_type=ENTITY, entity_id=mv.id,
          data={"label": mv.label, "from": old_state, "to": mv.state,
                "instrument": inst.serial if inst else None, "deployments_ended": ended,
                "reason": reason, "signature_id": sig.id, "meaning": sig.meaning},
          hashes=_signature_hashes(sig))
    return _result(mv, old_state, actor, sig)


def active_model_on(session: Session, instrument_id: int, property_id: int,
                    grade_id: int | None = None, *, any_grade: bool = False) -> list[ModelVersion]:
    """Versions active on an instrument for a property (one grade, or every grade)."""
    out = []
    for dep in _active_deployments(session, instrument_id=instrument_id):
        mv = session.get(ModelVersion, dep.model_version_id)
        if mv.property_id == property_id and (any_grade or mv.grade_id == grade_id):
            out.append(mv)
    return out
