"""Trace a reported result back to everything it rests on, as one JSON document.

prediction → spectrum → model version (recipe, artifact hash, state history with
signatures, validations, deployments, QC state at prediction time, due status)
→ calibration set → each member sample → its spectra and reference results
(including superseded ones and their corrections) → the selection run that
chose it.

The document follows ``trace_schema.json`` (``schema_version`` 1). Queries are
bounded: master data once, then one query per table with ``IN (...)`` lists
(chunked below SQLite's parameter limit), never one query per member; spectrum
and artifact blobs are read only for the one predicted spectrum and the one model.
"""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path
from typing import Any, Iterable

from sqlalchemy import or_, select
from sqlmodel import Session

from ..catalog import precision_at
from ..chemometrics.artifact import q_limit_of
from ..chemometrics.fitted import DESCRIPTIONS, load_fitted
from ..chemometrics.validation import precision_summary
from ..errors import InputError, IntegrityError, NotFoundError
from ..lifecycle.permissions import Action
from ..storage.lookups import get_model
from ..storage.models import (AuditEvent, CalibrationMember, CalibrationSet, Deployment, Grade,
                              Instrument, ModelStateChange, ModelVersion, Prediction, Property,
                              QCResult, ReferenceMethod, ReferenceResult, RevalidationTrigger,
                              Sample, SelectionPick, SelectionRun, Signature, Site, SpectralAxis,
                              Spectrum, User, ValidationRecord)
from ..plain_json import plain_json
from ..storage.bulk import in_blocks
from ..storage.revalidation_store import due_status_of, policy_for
from ..storage.types import as_utc, utcnow
from .content_hashes import (artifact_hash, calibration_set_hash, reference_result_hash,
                             signature_hash, spectrum_hash, validation_record_hash)

SCHEMA_NAME = "specledger-trace"
SCHEMA_VERSION = 1
SCHEMA_PATH = Path(__file__).with_name("trace_schema.json")
CAUTION = ("Model results do not replace the specification test method: a predicted value is "
           "an estimate, valid only inside the space the model was calibrated and validated on.")
_QC_RECENT = 10


def load_schema() -> dict:
    """The JSON Schema (draft 2020-12) of a trace document."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def _t(value: datetime | None) -> str | None:
    value = as_utc(value)
    return value.isoformat().replace("+00:00", "Z") if value is not None else None


def _clean(obj: Any) -> Any:
    # Strict JSON has no NaN/Infinity: a non-finite diagnostic becomes null.
    return plain_json(obj, datetime_text=_t)


def _merge_ok(integrity: dict, key: str, oks: list[bool]) -> None:
    """AND ``oks`` into ``integrity[key]`` (None while nothing of the kind was checked)."""
    if oks:
        prev = integrity.get(key)
        integrity[key] = all(oks) and prev is not False


def _chunks(ids: Iterable[int]) -> Iterable[list[int]]:
    return in_blocks(sorted(set(ids)))


class _Lookups:
    """Master data (small tables) read once per trace."""

    def __init__(self, session: Session):
        self.session = session
        self.users = dict(session.execute(select(User.id, User.name)).all())
        self.instruments = {r.id: r for r in session.execute(
            select(Instrument.id, Instrument.serial, Instrument.site_id)).all()}
        self.sites = dict(session.execute(select(Site.id, Site.name)).all())
        self.grades = dict(session.execute(select(Grade.id, Grade.code)).all())
        self.properties = {p.id: p for p in session.execute(
            select(Property.id, Property.code, Property.unit)).all()}
        self.methods = {m.id: m for m in session.execute(
            select(ReferenceMethod.id, ReferenceMethod.code, ReferenceMethod.property_id,
                   ReferenceMethod.repeatability, ReferenceMethod.reproducibility)).all()}

    def user(self, uid: int | None) -> str | None:
        return self.users.get(uid) if uid is not None else None

    def serial(self, iid: int | None) -> str | None:
        row = self.instruments.get(iid)
        return row.serial if row else None

    def methods_of(self, property_id: int) -> list[int]:
        return [m.id for m in self.methods.values() if m.property_id == property_id]


# --------------------------------------------------------------------------- pieces
def _sample_doc(lk: _Lookups, s) -> dict:
    return {"id": s.id, "external_id": s.external_id, "site": lk.sites.get(s.site_id),
            "grade": lk.grades.get(s.grade_id), "taken_at": _t(s.taken_at), "batch": s.batch,
            "source": s.source}


_SAMPLE_COLS = (Sample.id, Sample.external_id, Sample.site_id, Sample.grade_id, Sample.taken_at,
                Sample.batch, Sample.source)
_RR = ReferenceResult
_RESULT_COLS = (_RR.id, _RR.sample_id, _RR.method_id, _RR.value, _RR.lab, _RR.tested_at,
                _RR.operator, _RR.comment, _RR.status, _RR.status_reason, _RR.supersedes_id,
                _RR.selection_pick_id, _RR.sha256, _RR.imported_by_id)
_MEMBER_COLS = (CalibrationMember.set_id, CalibrationMember.sample_id, CalibrationMember.role,
                CalibrationMember.reference_value, CalibrationMember.reference_result_ids,
                CalibrationMember.spectrum_ids)
# Plain rows (attribute access by column name) rather than ORM objects: building ORM
# instances was most of a trace's time on a 150-member set.
_SPECTRUM_COLS = (Spectrum.id, Spectrum.sample_id, Spectrum.instrument_id, Spectrum.axis_id,
                  Spectrum.acquired_at, Spectrum.sha256, Spectrum.operator, Spectrum.source_file,
                  Spectrum.imported_by_id)


def _spectrum_doc(lk: _Lookups, sp, used: bool | None = None) -> dict:
    doc = {"id": sp.id, "sha256": sp.sha256, "instrument": lk.serial(sp.instrument_id),
           "acquired_at": _t(sp.acquired_at), "operator": sp.operator,
           "source_file": sp.source_file, "imported_by": lk.user(sp.imported_by_id)}
    if used is not None:
        doc["used"] = used
    return doc


def _result_doc(lk: _Lookups, r, superseded_by: dict[int, int],
                used: bool | None = None) -> dict:
    method = lk.methods.get(r.method_id)
    prop = lk.properties.get(method.property_id) if method else None
    doc = {"id": r.id, "method": method.code if method else None,
           "property": prop.code if prop else None, "unit": prop.unit if prop else None,
           "value": r.value, "lab": r.lab, "tested_at": _t(r.tested_at), "operator": r.operator,
           "r": precision_at(method.repeatability, r.value) if method else None,
           "R": precision_at(method.reproducibility, r.value) if method else None,
           "status": r.status, "status_reason": r.status_reason, "comment": r.comment,
           "supersedes": r.supersedes_id, "superseded_by": superseded_by.get(r.id),
           "sha256": r.sha256, "hash_ok": reference_result_hash(r) == r.sha256,
           "imported_by": lk.user(r.imported_by_id)}
    if used is not None:
        doc["used"] = used
    return doc


def _in_rows(session: Session, stmt_for, ids: Iterable[int]) -> list:
    out = []
    for part in _chunks(ids):
        out += session.execute(stmt_for(part)).all()
    return out


# --------------------------------------------------------------------------- model
def _signature_doc(lk: _Lookups, s: Signature, mv: ModelVersion, cs_sha: str | None,
                   validation_shas: set[str]) -> dict:
    return {"id": s.id, "signer": lk.user(s.user_id), "meaning": s.meaning, "reason": s.reason,
            "signed_at": _t(s.signed_at), "entity_type": s.entity_type, "entity_id": s.entity_id,
            "signed_parts": s.signed_parts or {}, "signed_sha256": s.signed_sha256,
            "record_sha256": signature_hash(s),
            "parts_match_current": _parts_match(s, mv, cs_sha, validation_shas)}


def _parts_match(s: Signature, mv: ModelVersion, cs_sha: str | None,
                 validation_shas: set[str]) -> bool | None:
    """Whether what the signature covers still carries the hashes that were signed.

    The parts must hash to the signed SHA-256, and each known part must equal the
    model's current artifact, calibration-set or validation-record hash (those hashes
    are themselves checked against the stored content in ``integrity``).
    """
    from ..errors import InputError as _InputError
    from ..lifecycle.signatures import signed_content_hash

    parts = s.signed_parts or {}
    if not parts or s.entity_type != "model_version" or s.entity_id != mv.id:
        return None
    try:
        if signed_content_hash(parts) != s.signed_sha256:
            return False
    except _InputError:
        return False
    checks = []
    if "artifact_sha256" in parts:
        checks.append(parts["artifact_sha256"] == mv.artifact_sha256)
    if "calibration_set_sha256" in parts and cs_sha is not None:
        checks.append(parts["calibration_set_sha256"] == cs_sha)
    if "validation_record_sha256" in parts:
        checks.append(parts["validation_record_sha256"] in validation_shas)
    return all(checks)


def _model_doc(session: Session, lk: _Lookups, mv: ModelVersion, cs: CalibrationSet | None,
               at: datetime | None, instrument_id: int | None, now: datetime,
               integrity: dict) -> dict:
    prop = lk.properties.get(mv.property_id)
    history = session.execute(select(ModelStateChange).where(
        ModelStateChange.model_version_id == mv.id).order_by(ModelStateChange.occurred_at,
                                                             ModelStateChange.id)).scalars().all()
    deployments = session.execute(select(Deployment).where(
        Deployment.model_version_id == mv.id).order_by(Deployment.deployed_at,
                                                       Deployment.id)).scalars().all()
    linked = {h.signature_id for h in history} | {d.signature_id for d in deployments}
    linked.discard(None)
    cond = (Signature.entity_type == "model_version") & (Signature.entity_id == mv.id)
    if linked:
        cond = or_(cond, Signature.id.in_(sorted(linked)))
    sigs = {s.id: s for s in session.execute(select(Signature).where(cond)
                                             .order_by(Signature.id)).scalars().all()}
    validations = session.execute(select(ValidationRecord).where(
        ValidationRecord.model_version_id == mv.id).order_by(ValidationRecord.id)).scalars().all()
    cs_sha = cs.sha256 if cs else None
    shas = {v.sha256 for v in validations}
    sig_docs = {sid: _signature_doc(lk, s, mv, cs_sha, shas) for sid, s in sigs.items()}
    val_sets = {v.calibration_set_id for v in validations}
    set_names = dict(session.execute(select(CalibrationSet.id, CalibrationSet.name).where(
        CalibrationSet.id.in_(sorted(val_sets)))).all()) if val_sets else {}
    events = session.execute(select(AuditEvent.id, AuditEvent.occurred_at, AuditEvent.user_name,
                                    AuditEvent.action, AuditEvent.hash).where(
        AuditEvent.entity_type == "model_version", AuditEvent.entity_id == mv.id,
        AuditEvent.action != Action.PREDICT).order_by(AuditEvent.id)).all()
    artifact_ok = artifact_hash(bytes(mv.artifact)) == mv.artifact_sha256
    integrity["artifact_hash_ok"] = artifact_ok
    val_ok = [validation_record_hash(v) == v.sha256 for v in validations]
    integrity["validation_records_hash_ok"] = all(val_ok) if val_ok else None
    if not artifact_ok:
        integrity["altered"].append(f"model_version {mv.id}")
    integrity["altered"] += [f"validation_record {v.id}" for v, ok in zip(validations, val_ok)
                             if not ok]
    sig_ok = [d["parts_match_current"] for d in sig_docs.values()
              if d["parts_match_current"] is not None]
    integrity["signatures_match_content"] = all(sig_ok) if sig_ok else None
    parent = session.execute(select(ModelVersion.label).where(
        ModelVersion.id == mv.parent_id)).scalar() if mv.parent_id else None
    rmsecv = (mv.cv or {}).get("rmsecv") or []
    return _clean({
        "id": mv.id, "label": mv.label, "property": prop.code if prop else None,
        "unit": prop.unit if prop else None, "grade": lk.grades.get(mv.grade_id),
        "family": mv.family, "state": mv.state, "author": lk.user(mv.author_id),
        "created_at": _t(mv.created_at), "parent": parent, "recipe": mv.recipe,
        "n_components": mv.n_components,
        "cv": {"method": (mv.cv or {}).get("method"), "n_folds": (mv.cv or {}).get("n_folds"),
               "selection_rule": (mv.cv or {}).get("selection_rule"),
               "rmsecv_at_selected": rmsecv[mv.n_components - 1]
               if 0 < mv.n_components <= len(rmsecv) else None,
               "n_spectra": (mv.cv or {}).get("n_spectra"),
               "n_samples": (mv.cv or {}).get("n_samples")},
        "description": DESCRIPTIONS[mv.family],
        "settings": _settings(mv) if artifact_ok else None,
        "artifact_sha256": mv.artifact_sha256, "artifact_hash_ok": artifact_ok,
        "q_limit": q_limit_of(mv.artifact, mv.artifact_sha256) if artifact_ok else None,
        "last_validated_at": _t(mv.last_validated_at),
        "state_history": [{"from": h.from_state, "to": h.to_state, "by": lk.user(h.user_id),
                           "at": _t(h.occurred_at), "reason": h.reason,
                           "signature": sig_docs.get(h.signature_id)} for h in history],
        "signatures": list(sig_docs.values()),
        "validations": [{"id": v.id, "kind": v.kind, "calibration_set": set_names.get(
            v.calibration_set_id), "passed": v.passed, "n": v.n,
            **precision_summary(v.statistics, v.criteria), "bias_t": v.bias_t, "bias_p": v.bias_p,
            "slope": v.slope, "intercept": v.intercept, "r2": v.r2,
            "reasons": v.reasons, "by": lk.user(v.user_id), "at": _t(v.created_at),
            "sha256": v.sha256, "hash_ok": ok} for v, ok in zip(validations, val_ok)],
        "deployments": [{"id": d.id, "instrument": lk.serial(d.instrument_id), "state": d.state,
                         "deployed_at": _t(d.deployed_at), "ended_at": _t(d.ended_at),
                         "by": lk.user(d.deployed_by_id),
                         "signature": sig_docs.get(d.signature_id)} for d in deployments],
        "qc_at_prediction": _qc_at(session, lk, mv, at, instrument_id) if at else None,
        "due": _due(session, mv, now),
        "audit_events": [{"seq": e.id, "at": _t(e.occurred_at), "user": e.user_name,
                          "action": e.action, "hash": e.hash} for e in events],
    })


def _settings(mv: ModelVersion) -> dict | None:
    """The family's settings and fitted figures from the (verified) artifact."""
    try:
        return load_fitted(mv.artifact, mv.artifact_sha256).summary()
    except (IntegrityError, InputError):
        return None


def _qc_at(session: Session, lk: _Lookups, mv: ModelVersion, at: datetime,
           instrument_id: int | None) -> dict:
    """QC results and revalidation triggers as they stood when the prediction was made."""
    q = select(QCResult).where(QCResult.model_version_id == mv.id, QCResult.measured_at <= at)
    if instrument_id is not None:
        q = q.where(QCResult.instrument_id == instrument_id)
    recent = session.execute(q.order_by(QCResult.measured_at.desc(), QCResult.id.desc())
                             .limit(_QC_RECENT)).scalars().all()
    triggers = session.execute(select(RevalidationTrigger).where(
        RevalidationTrigger.model_version_id == mv.id, RevalidationTrigger.raised_at <= at,
        or_(RevalidationTrigger.cleared_at == None,  # noqa: E711
            RevalidationTrigger.cleared_at > at)).order_by(RevalidationTrigger.id)).scalars().all()
    return {
        "at": _t(at), "instrument": lk.serial(instrument_id),
        "recent_results": [{"id": r.id, "instrument": lk.serial(r.instrument_id),
                            "material": r.material, "known_value": r.known_value,
                            "measured_value": r.measured_value, "measured_at": _t(r.measured_at),
                            "by": lk.user(r.user_id), "signals": r.signals or []}
                           for r in recent],
        "signal_open": any(t.kind == "qc_signal" for t in triggers),
        "open_triggers": [{"id": t.id, "kind": t.kind, "raised_at": _t(t.raised_at),
                           "cleared_at": _t(t.cleared_at), "detail": t.detail or {}}
                          for t in triggers],
    }


def _due(session: Session, mv: ModelVersion, now: datetime) -> dict:
    status = due_status_of(session, mv, now)
    interval = policy_for(session, mv).interval_days
    if status is None:
        return {"applies": False, "interval_days": interval, "due_at": None, "days_left": None,
                "overdue": None, "reasons": []}
    return {"applies": True, "interval_days": interval, "due_at": _t(status.due_at),
            "days_left": status.days_left, "overdue": status.overdue,
            "reasons": list(status.reasons)}


# --------------------------------------------------------------------------- calibration set
def _calset_doc(session: Session, lk: _Lookups, cs: CalibrationSet, integrity: dict) -> dict:
    members = session.execute(select(*_MEMBER_COLS).where(CalibrationMember.set_id == cs.id)
                              .order_by(CalibrationMember.role, CalibrationMember.sample_id)).all()
    sample_ids = [m.sample_id for m in members]
    samples = {r.id: r for r in _in_rows(
        session, lambda part: select(*_SAMPLE_COLS).where(Sample.id.in_(part)), sample_ids)}
    spectra: dict[int, list] = {}
    for sp in _in_rows(session, lambda part: select(*_SPECTRUM_COLS).where(
            Spectrum.sample_id.in_(part)).order_by(Spectrum.acquired_at, Spectrum.id), sample_ids):
        spectra.setdefault(sp.sample_id, []).append(sp)
    method_ids = lk.methods_of(cs.property_id)
    results: dict[int, list] = {}
    if method_ids:
        for r in _in_rows(session, lambda part: select(*_RESULT_COLS).where(
                _RR.sample_id.in_(part), _RR.method_id.in_(method_ids))
                .order_by(_RR.tested_at, _RR.id), sample_ids):
            results.setdefault(r.sample_id, []).append(r)
    superseded_by = {r.supersedes_id: r.id for rs in results.values() for r in rs
                     if r.supersedes_id is not None}
    selection = _selections(session, lk, cs, sample_ids, results, members)

    cs_ok = calibration_set_hash(cs, list(members)) == cs.sha256
    integrity["calibration_set_hash_ok"] = cs_ok
    if not cs_ok:
        integrity["altered"].append(f"calibration_set {cs.id}")
    member_docs = []
    result_ok: list[bool] = []
    for m in members:
        used_results = set(m.reference_result_ids or [])
        used_spectra = set(m.spectrum_ids or [])
        rdocs = [_result_doc(lk, r, superseded_by, r.id in used_results)
                 for r in results.get(m.sample_id, [])]
        for d in rdocs:
            result_ok.append(d["hash_ok"])
            if not d["hash_ok"]:
                integrity["altered"].append(f"reference_result {d['id']}")
        sample = samples.get(m.sample_id)
        member_docs.append({
            "sample": _sample_doc(lk, sample) if sample else {"id": m.sample_id},
            "role": m.role, "reference_value": m.reference_value,
            "reference_result_ids": list(m.reference_result_ids or []),
            "spectrum_ids": list(m.spectrum_ids or []),
            "spectra": [_spectrum_doc(lk, sp, sp.id in used_spectra)
                        for sp in spectra.get(m.sample_id, [])],
            "reference_results": rdocs,
            "selection": selection.get(m.sample_id)})
    _merge_ok(integrity, "reference_results_hash_ok", result_ok)
    prop = lk.properties.get(cs.property_id)
    return {"id": cs.id, "name": cs.name, "sha256": cs.sha256, "hash_ok": cs_ok,
            "property": prop.code if prop else None, "grade": lk.grades.get(cs.grade_id),
            "description": cs.description, "validation_rule": cs.validation_rule,
            "n_cal": cs.n_cal, "n_val": cs.n_val, "frozen": cs.frozen,
            "created_by": lk.user(cs.created_by_id), "created_at": _t(cs.created_at),
            "members": member_docs}


def _selections(session: Session, lk: _Lookups, cs: CalibrationSet, sample_ids: list[int],
                results: dict[int, list], members) -> dict[int, dict]:
    """The selection run that chose each member: the pick its used result answered, else the
    latest pick of the sample by a run asking for the set's property."""
    P, Run = SelectionPick, SelectionRun
    picks = _in_rows(session, lambda part: select(
        P.id, P.run_id, P.sample_id, P.rank, P.cost, P.reason).where(P.sample_id.in_(part)),
        sample_ids)
    if not picks:
        return {}
    runs = {r.id: r for r in _in_rows(session, lambda part: select(
        Run.id, Run.method, Run.created_at, Run.user_id, Run.state, Run.property_codes).where(
        Run.id.in_(part)), {p.run_id for p in picks})}
    prop = lk.properties.get(cs.property_id)
    by_id = {p.id: p for p in picks}
    by_sample: dict[int, list] = {}
    for p in picks:
        by_sample.setdefault(p.sample_id, []).append(p)
    out = {}
    for m in members:
        used = set(m.reference_result_ids or [])
        answered = [by_id[r.selection_pick_id] for r in results.get(m.sample_id, [])
                    if r.id in used and r.selection_pick_id in by_id]
        asked = sorted((p for p in by_sample.get(m.sample_id, []) if p.run_id in runs
                        and prop is not None and prop.code in (runs[p.run_id].property_codes or [])),
                       key=lambda p: p.run_id, reverse=True)
        pick = (answered or asked or [None])[0]
        if pick is None:
            continue
        run = runs.get(pick.run_id)
        out[m.sample_id] = {
            "run_id": pick.run_id, "pick_id": pick.id, "method": run.method if run else None,
            "rank": pick.rank, "reason": pick.reason, "cost": pick.cost,
            "selected_at": _t(run.created_at) if run else None,
            "by": lk.user(run.user_id) if run else None,
            "run_state": run.state if run else None,
            "linked_by_result": bool(answered)}
    return out


# --------------------------------------------------------------------------- roots
def _prediction_parts(session: Session, lk: _Lookups, pred: Prediction, doc: dict,
                      now: datetime) -> None:
    integrity = doc["integrity"]
    sp = session.get(Spectrum, pred.spectrum_id)
    axis = session.get(SpectralAxis, sp.axis_id)
    sample = session.get(Sample, sp.sample_id)
    mv = session.get(ModelVersion, pred.model_version_id)
    prop = lk.properties.get(mv.property_id)
    try:
        sp_ok = spectrum_hash(sp, axis) == sp.sha256
    except InputError:
        sp_ok = False  # data no longer as long as its axis
    integrity["spectrum_hash_ok"] = sp_ok
    if not sp_ok:
        integrity["altered"].append(f"spectrum {sp.id}")
    links = sorted(((pred.diagnostics or {}).get("inputs") or {}).items())
    input_ids = [link.get("model_version_id") for _, link in links
                 if link.get("model_version_id") is not None]
    families = dict(session.execute(select(ModelVersion.id, ModelVersion.family).where(
        ModelVersion.id.in_(input_ids))).all()) if input_ids else {}
    doc["prediction"] = {
        "id": pred.id, "value": pred.value, "property": prop.code if prop else None,
        "unit": prop.unit if prop else None, "model": mv.label,
        "instrument": lk.serial(pred.instrument_id), "predicted_at": _t(pred.predicted_at),
        "by": lk.user(pred.user_id), "flags": list(pred.flags or []),
        "diagnostics": pred.diagnostics or {},
        # a derived result: each input result it combined and the version that gave it
        "inputs": [{"property": code, "model": link.get("model"),
                    "model_version_id": link.get("model_version_id"),
                    "family": families.get(link.get("model_version_id")),
                    "prediction_id": link.get("prediction_id"), "value": link.get("value"),
                    "flags": link.get("flags", [])}
                   for code, link in links]}
    doc["spectrum"] = {**_spectrum_doc(lk, sp), "hash_ok": sp_ok, "sample_id": sample.external_id,
                       "axis": {"id": axis.id, "unit": axis.unit, "n_points": axis.n_points,
                                "first_x": axis.first_x, "last_x": axis.last_x,
                                "sha256": axis.sha256}}
    doc["sample"] = _sample_doc(lk, sample)
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    doc["model"] = _model_doc(session, lk, mv, cs, pred.predicted_at, pred.instrument_id, now,
                              integrity)
    doc["calibration_set"] = _calset_doc(session, lk, cs, integrity) if cs else None


def _sample_record(session: Session, lk: _Lookups, sample: Sample, prop, integrity: dict) -> dict:
    """The sample's spectra, its results for the property, and the sets and models using it."""
    spectra = session.execute(select(*_SPECTRUM_COLS).where(Spectrum.sample_id == sample.id)
                              .order_by(Spectrum.acquired_at, Spectrum.id)).all()
    method_ids = lk.methods_of(prop.id)
    results = session.execute(select(*_RESULT_COLS).where(
        _RR.sample_id == sample.id, _RR.method_id.in_(method_ids))
        .order_by(_RR.tested_at, _RR.id)).all() if method_ids else []
    superseded_by = {r.supersedes_id: r.id for r in results if r.supersedes_id is not None}
    memberships = session.execute(select(CalibrationMember, CalibrationSet).join(
        CalibrationSet, CalibrationSet.id == CalibrationMember.set_id).where(
        CalibrationMember.sample_id == sample.id, CalibrationSet.property_id == prop.id)
        .order_by(CalibrationSet.id)).all()
    result_docs = [_result_doc(lk, r, superseded_by) for r in results]
    _merge_ok(integrity, "reference_results_hash_ok", [d["hash_ok"] for d in result_docs])
    integrity["altered"] += [f"reference_result {d['id']}" for d in result_docs if not d["hash_ok"]]
    set_ids = [cs.id for _, cs in memberships]
    models: dict[int, list] = {}
    if set_ids:
        for row in session.execute(select(ModelVersion.id, ModelVersion.label, ModelVersion.state,
                                          ModelVersion.family, ModelVersion.calibration_set_id)
                                   .where(ModelVersion.calibration_set_id.in_(set_ids))
                                   .order_by(ModelVersion.id)):
            models.setdefault(row.calibration_set_id, []).append(
                {"id": row.id, "label": row.label, "state": row.state, "family": row.family})
    return {
        "sample": _sample_doc(lk, sample), "property": prop.code,
        "spectra": [_spectrum_doc(lk, sp) for sp in spectra],
        "reference_results": result_docs,
        "calibration_sets": [{"id": cs.id, "name": cs.name, "sha256": cs.sha256, "role": m.role,
                              "reference_value": m.reference_value,
                              "reference_result_ids": list(m.reference_result_ids or []),
                              "spectrum_ids": list(m.spectrum_ids or []),
                              "models": models.get(cs.id, [])} for m, cs in memberships]}


def _find_sample(session: Session, external_id: str) -> Sample:
    site_name, sep, ext = external_id.partition("/")
    q = select(Sample)
    if sep and session.execute(select(Site.id).where(Site.name == site_name)).first():
        q = q.join(Site, Site.id == Sample.site_id).where(Site.name == site_name,
                                                          Sample.external_id == ext)
    else:
        q = q.where(Sample.external_id == external_id)
    rows = session.execute(q).scalars().all()
    if not rows and external_id.isdigit():
        row = session.get(Sample, int(external_id))
        rows = [row] if row else []
    if not rows:
        raise NotFoundError(f"unknown sample {external_id!r}")
    if len(rows) > 1:
        raise InputError(f"sample {external_id!r} exists at several sites; give SITE/SAMPLE",
                         field="--sample")
    return rows[0]


def build_trace(session: Session, *, prediction_id: int | None = None, sample: str | None = None,
                property_code: str | None = None, model: str | None = None,
                now: datetime | None = None) -> dict:
    """The trace document of a prediction, a sample's property, or a model version.

    Parameters
    ----------
    prediction_id : int, optional
        Trace this prediction.
    sample, property_code : str, optional
        Trace the latest prediction of this property for this sample (sample id,
        or ``SITE/SAMPLE`` when ids repeat across sites); the document also holds
        the sample's own record (spectra, results, sets and models using it).
    model : str, optional
        Trace a model version (label or id): no prediction part.
    now : datetime, optional
        The instant for the due status (default: now).

    Raises
    ------
    InputError
        Not exactly one root given, or ``sample`` without ``property_code``.
    NotFoundError
        The prediction, sample, property or model does not exist.
    """
    roots = [prediction_id is not None, sample is not None, model is not None]
    if sum(roots) != 1:
        raise InputError("give exactly one of a prediction, a sample (with a property) or a "
                         "model version",
                         field="--prediction")
    if sample is not None and not property_code:
        raise InputError("tracing a sample needs a property", field="--property")
    now = as_utc(now) or utcnow()
    lk = _Lookups(session)
    last = session.execute(select(AuditEvent.id, AuditEvent.hash)
                           .order_by(AuditEvent.id.desc()).limit(1)).first()
    doc: dict[str, Any] = {
        "schema": SCHEMA_NAME, "schema_version": SCHEMA_VERSION, "generated_at": _t(now),
        "caution": CAUTION, "root": {}, "prediction": None, "spectrum": None, "sample": None,
        "sample_record": None, "model": None, "calibration_set": None,
        "integrity": {"spectrum_hash_ok": None, "artifact_hash_ok": None,
                      "calibration_set_hash_ok": None, "reference_results_hash_ok": None,
                      "validation_records_hash_ok": None, "signatures_match_content": None,
                      "altered": [],
                      "note": "Stored content checked against its hash columns; "
                              "verifying the audit trail also checks the hash chain itself."},
        "audit": {"events": last[0] if last else 0, "head": last[1] if last else None},
    }
    if prediction_id is not None:
        pred = session.get(Prediction, int(prediction_id))
        if pred is None:
            raise NotFoundError(f"unknown prediction {prediction_id}")
        doc["root"] = {"kind": "prediction", "prediction_id": pred.id}
        _prediction_parts(session, lk, pred, doc, now)
    elif sample is not None:
        prop = next((p for p in lk.properties.values()
                     if p.code.upper() == property_code.strip().upper()), None)
        if prop is None:
            raise NotFoundError(f"unknown property {property_code!r}")
        srow = _find_sample(session, sample)
        pid = session.execute(select(Prediction.id).join(
            Spectrum, Spectrum.id == Prediction.spectrum_id).join(
            ModelVersion, ModelVersion.id == Prediction.model_version_id).where(
            Spectrum.sample_id == srow.id, ModelVersion.property_id == prop.id).order_by(
            Prediction.predicted_at.desc(), Prediction.id.desc()).limit(1)).scalar()
        doc["root"] = {"kind": "sample", "sample": srow.external_id, "property": prop.code,
                       "prediction_id": pid}
        doc["sample_record"] = _sample_record(session, lk, srow, prop, doc["integrity"])
        if pid is not None:
            _prediction_parts(session, lk, session.get(Prediction, pid), doc, now)
        else:
            doc["sample"] = _sample_doc(lk, srow)
    else:
        mv = get_model(session, str(model))
        doc["root"] = {"kind": "model", "model": mv.label}
        cs = session.get(CalibrationSet, mv.calibration_set_id)
        doc["model"] = _model_doc(session, lk, mv, cs, None, None, now, doc["integrity"])
        doc["calibration_set"] = _calset_doc(session, lk, cs, doc["integrity"]) if cs else None
    doc["integrity"]["altered"] = list(dict.fromkeys(doc["integrity"]["altered"]))
    return doc
