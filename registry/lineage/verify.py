"""``audit verify``: recompute the hash chain and every content hash the chain vouches for.

Three questions, answered in one streaming pass over the audit trail and one
over each hashed table:

1. Is the chain intact? Each event's hash is recomputed from its previous hash
   and its stored payload; sequence numbers must run without gaps; the
   columns must agree with the hashed payload (a reordered or edited row
   disagrees with what was hashed).
2. Does stored content still match its hash? Each spectrum, reference result,
   calibration set, model artifact, validation record and signature is hashed
   again from what is stored (:mod:`registry.lineage.content_hashes`) and
   compared with its hash column.
3. Does it match what the chain vouched for? Service actions put the content
   hashes of what they created or changed into their audit payload
   (``data["hashes"]``); the latest vouched hash per entity must equal the
   recomputed one. So changing data *and* its hash column is still caught, a
   row inserted behind the registry's back is reported as not vouched for,
   and a vouched row that disappeared is reported as missing. Predictions are
   checked against the values their ``predict`` events recorded.

Memory is bounded by the vouched-hash map (a few short strings per entity);
events and spectra are read in key-ordered batches.
"""

from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass, field
from typing import Any, Iterator

from sqlalchemy import select
from sqlmodel import Session

from ..lifecycle.permissions import Action
from ..spectra.axes import axis_sha256
from ..storage.models import (AuditEvent, CalibrationMember, CalibrationSet, ModelVersion,
                              Prediction, ReferenceResult, Sample, Signature, SpectralAxis,
                              Spectrum, ValidationRecord)
from ..storage.bulk import in_blocks
from ..storage.types import as_utc
from .audit_chain import GENESIS, link_hash
from .canonical import utc_text
from .content_hashes import (artifact_hash, calibration_set_hash, reference_result_hash,
                             signature_hash, validation_record_hash)

#: Entity kinds whose content hashes service actions vouch for in ``data["hashes"]``.
HASHED_KINDS = ("spectrum", "reference_result", "calibration_set", "model_version",
                "validation_record", "signature")

_EVENT_BATCH = 5000
_SPECTRUM_BATCH = 2000
_ROW_BATCH = 5000


@dataclass
class Problem:
    """One thing that does not verify, naming the entity concerned."""

    entity_type: str
    entity_id: int | None
    message: str
    label: str = ""  # e.g. the sample id or model label, for the reader
    #: The audit event that vouched for (or recorded) the entity, when one did.
    event: int | None = None

    def text(self) -> str:
        who = f"{self.entity_type} {self.entity_id}" if self.entity_id is not None else self.entity_type
        return f"{who}{f' ({self.label})' if self.label else ''}: {self.message}"

    def to_json(self) -> dict[str, Any]:
        return {"entity_type": self.entity_type, "entity_id": self.entity_id,
                "label": self.label, "message": self.message, "vouched_by_event": self.event}


@dataclass
class VerifyReport:
    """Outcome of :func:`verify_registry`."""

    n_events: int = 0
    head: str = GENESIS
    first_broken_seq: int | None = None
    chain_problems: list[Problem] = field(default_factory=list)
    content_problems: list[Problem] = field(default_factory=list)
    checked: dict[str, int] = field(default_factory=dict)
    seconds: float = 0.0

    @property
    def intact(self) -> bool:
        return not self.chain_problems and not self.content_problems

    @property
    def problems(self) -> list[Problem]:
        return self.chain_problems + self.content_problems

    def entities(self) -> set[tuple[str, int | None]]:
        """(kind, id) of every entity named by a problem."""
        return {(p.entity_type, p.entity_id) for p in self.problems}

    def to_json(self) -> dict[str, Any]:
        first = next((p for p in self.chain_problems if p.entity_id == self.first_broken_seq), None)
        return {"intact": self.intact, "events": self.n_events, "head": self.head,
                "first_broken_link": None if self.first_broken_seq is None else
                {"seq": self.first_broken_seq, "message": first.message if first else ""},
                "chain_problems": [p.to_json() for p in self.chain_problems],
                "content_problems": [p.to_json() for p in self.content_problems],
                "checked": dict(self.checked), "seconds": round(self.seconds, 3)}


class _Vouched:
    """Latest hash vouched for each (kind, id), with the event that vouched for it."""

    def __init__(self) -> None:
        self.hashes: dict[str, dict[int, tuple[str, int]]] = {k: {} for k in HASHED_KINDS}
        # prediction id -> (spectrum id, model version id, value, event seq)
        self.predictions: dict[int, tuple[int, int | None, float, int]] = {}

    def take(self, seq: int, body: dict) -> None:
        data = body.get("data")
        if not isinstance(data, dict):
            return
        hashes = data.get("hashes")
        if isinstance(hashes, dict):
            for kind, pairs in hashes.items():
                table = self.hashes.get(kind)
                if table is None or not isinstance(pairs, list):
                    continue
                for pair in pairs:
                    try:
                        table[int(pair[0])] = (str(pair[1]), seq)
                    except (TypeError, ValueError, IndexError):
                        continue
        if body.get("action") == Action.PREDICT and isinstance(data.get("predictions"), list):
            for row in data["predictions"]:
                try:
                    self.predictions[int(row[0])] = (int(row[1]), body.get("entity_id"),
                                                     float(row[2]), seq)
                except (TypeError, ValueError, IndexError):
                    continue


def _time_text(value) -> str:
    # The text canonical_json writes for a datetime; naive values read back are UTC.
    if value is None:
        return ""
    return utc_text(as_utc(value), "occurred_at")


def _walk_chain(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    cols = (AuditEvent.id, AuditEvent.occurred_at, AuditEvent.user_name, AuditEvent.action,
            AuditEvent.entity_type, AuditEvent.entity_id, AuditEvent.payload,
            AuditEvent.prev_hash, AuditEvent.hash)
    prev = GENESIS
    expected = 1
    last_id = 0

    def broken(seq: int, message: str) -> None:
        report.chain_problems.append(Problem("audit_event", seq, message))
        if report.first_broken_seq is None:
            report.first_broken_seq = seq

    while True:
        rows = session.execute(select(*cols).where(AuditEvent.id > last_id)
                               .order_by(AuditEvent.id).limit(_EVENT_BATCH)).all()
        if not rows:
            break
        for seq, at, user, action, etype, eid, payload, prev_hash, digest in rows:
            report.n_events += 1
            if seq != expected:
                broken(seq, f"sequence jumps from {expected - 1} to {seq}: "
                            f"{seq - expected} event(s) missing (deleted)")
            elif prev_hash != prev:
                broken(seq, f"previous-hash link does not match event {seq - 1} "
                            "(events removed, inserted or reordered)")
            if link_hash(prev_hash, payload) != digest:
                broken(seq, "payload does not match its hash (altered)")
            try:
                body = json.loads(payload)
            except ValueError:
                body = None
            if not isinstance(body, dict):
                broken(seq, "payload is not a JSON object")
            else:
                mismatched = [name for name, stored, hashed in (
                    ("seq", seq, body.get("seq")), ("action", action, body.get("action")),
                    ("entity_type", etype, body.get("entity_type")),
                    ("entity_id", eid, body.get("entity_id")), ("user", user, body.get("user")),
                    ("time", _time_text(at), body.get("at"))) if stored != hashed]
                if mismatched:
                    broken(seq, "columns disagree with the hashed payload "
                                f"({', '.join(mismatched)}): reordered or edited")
                vouched.take(seq, body)
            prev = digest
            expected = seq + 1
        last_id = rows[-1][0]
    report.head = prev


def _compare(report: VerifyReport, vouched: _Vouched, kind: str, entity_id: int,
             recomputed: str, stored: str | None, label: str = "") -> None:
    """Record what is wrong with one entity, if anything."""
    seen = vouched.hashes[kind].pop(entity_id, None)
    if stored is not None and recomputed != stored:
        report.content_problems.append(Problem(
            kind, entity_id, "stored content no longer matches its recorded hash (altered)", label,
            seen[1] if seen else None))
    elif seen is None:
        report.content_problems.append(Problem(
            kind, entity_id, "not vouched for by any audit event (written outside the registry)",
            label))
    elif seen[0] != recomputed:
        report.content_problems.append(Problem(
            kind, entity_id, f"content differs from what audit event {seen[1]} vouched for "
                             "(content and hash column both changed)", label, seen[1]))


def _batches(session: Session, cols: tuple, key, size: int) -> Iterator[list]:
    last = 0
    while True:
        rows = session.execute(select(*cols).where(key > last).order_by(key).limit(size)).all()
        if not rows:
            return
        yield rows
        last = rows[-1][0]


def _check_spectra(session: Session, report: VerifyReport, vouched: _Vouched,
                   sample_of: dict[int, int]) -> None:
    # The spectrum hash is SHA-256(axis float64 bytes + data float32 bytes); the axis part is
    # shared by thousands of spectra, so its digest state is computed once and copied.
    prefixes: dict[int, tuple[Any, int]] = {}
    for aid, unit, values, digest in session.execute(select(
            SpectralAxis.id, SpectralAxis.unit, SpectralAxis.values, SpectralAxis.sha256)):
        values = bytes(values)
        try:
            ok = len(values) % 8 == 0 and axis_sha256(_f8(values), unit) == digest
        except Exception:  # noqa: BLE001 - any failure to read the axis is a mismatch
            ok = False
        if not ok:
            report.content_problems.append(Problem(
                "spectral_axis", aid, "stored axis values no longer match their hash (altered)"))
        prefixes[aid] = (hashlib.sha256(values), len(values) // 8)
    n = 0
    for rows in _batches(session, (Spectrum.id, Spectrum.axis_id, Spectrum.data, Spectrum.sha256,
                                   Spectrum.sample_id), Spectrum.id, _SPECTRUM_BATCH):
        for sid, aid, data, stored, sample_id in rows:
            n += 1
            prefix, n_points = prefixes.get(aid, (None, 0))
            if prefix is None or len(data) != 4 * n_points:
                sample_of[sid] = sample_id
                report.content_problems.append(Problem(
                    "spectrum", sid, "data length does not match its spectral axis (altered)"))
                vouched.hashes["spectrum"].pop(sid, None)
                continue
            h = prefix.copy()
            h.update(data)
            before = len(report.content_problems)
            _compare(report, vouched, "spectrum", sid, h.hexdigest(), stored)
            if len(report.content_problems) > before:
                sample_of[sid] = sample_id
    report.checked["spectrum"] = n


def _f8(values: bytes):
    import numpy as np

    return np.frombuffer(values, dtype="<f8")


def _check_reference_results(session: Session, report: VerifyReport, vouched: _Vouched,
                             sample_of: dict[tuple[str, int], int]) -> None:
    # Plain rows (attribute access by column name) rather than ORM objects: faster, and the
    # caller's session is left as it was.
    n = 0
    R = ReferenceResult
    for rows in _batches(session, (R.id, R.sample_id, R.method_id, R.value, R.lab, R.tested_at,
                                   R.operator, R.supersedes_id, R.sha256), R.id, _ROW_BATCH):
        for r in rows:
            n += 1
            before = len(report.content_problems)
            _compare(report, vouched, "reference_result", r.id, reference_result_hash(r), r.sha256)
            if len(report.content_problems) > before:
                sample_of[("reference_result", r.id)] = r.sample_id
    report.checked["reference_result"] = n


def _check_calibration_sets(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    M, C = CalibrationMember, CalibrationSet
    members: dict[int, list] = {}
    for m in session.execute(select(M.set_id, M.sample_id, M.role, M.reference_value,
                                    M.reference_result_ids, M.spectrum_ids)):
        members.setdefault(m.set_id, []).append(m)
    sets = session.execute(select(C.id, C.name, C.property_id, C.grade_id, C.validation_rule,
                                  C.sha256).order_by(C.id)).all()
    for cs in sets:
        _compare(report, vouched, "calibration_set", cs.id,
                 calibration_set_hash(cs, members.get(cs.id, [])), cs.sha256, cs.name)
    orphans = set(members) - {cs.id for cs in sets}
    for set_id in sorted(orphans):
        report.content_problems.append(Problem(
            "calibration_set", set_id, "members exist for a calibration set that does not"))
    report.checked["calibration_set"] = len(sets)


def _check_models(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    n = 0
    for rows in _batches(session, (ModelVersion.id, ModelVersion.label, ModelVersion.artifact,
                                   ModelVersion.artifact_sha256), ModelVersion.id, 20):
        for mid, label, blob, stored in rows:
            n += 1
            _compare(report, vouched, "model_version", mid, artifact_hash(bytes(blob)), stored, label)
    report.checked["model_version"] = n


def _check_validations(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    V = ValidationRecord
    rows = session.execute(select(V.id, V.model_version_id, V.calibration_set_id, V.kind,
                                  V.statistics, V.criteria, V.passed, V.reasons, V.sha256)
                           .order_by(V.id)).all()
    for v in rows:
        _compare(report, vouched, "validation_record", v.id, validation_record_hash(v), v.sha256)
    report.checked["validation_record"] = len(rows)


def _check_signatures(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    S = Signature
    rows = session.execute(select(S.id, S.user_id, S.meaning, S.reason, S.signed_at,
                                  S.entity_type, S.entity_id, S.signed_parts, S.signed_sha256)
                           .order_by(S.id)).all()
    for s in rows:
        # A signature row has no hash column of its own: the chain's copy is the reference.
        _compare(report, vouched, "signature", s.id, signature_hash(s), None,
                 f"{s.meaning} on {s.entity_type} {s.entity_id}")
    report.checked["signature"] = len(rows)


def _check_predictions(session: Session, report: VerifyReport, vouched: _Vouched) -> None:
    n = 0
    recorded = vouched.predictions
    for rows in _batches(session, (Prediction.id, Prediction.spectrum_id,
                                   Prediction.model_version_id, Prediction.value),
                         Prediction.id, 20000):
        for pid, sid, mid, value in rows:
            n += 1
            seen = recorded.pop(pid, None)
            if seen is None:
                report.content_problems.append(Problem(
                    "prediction", pid, "not recorded by any predict event (written outside "
                                       "the registry)"))
            elif (seen[0], seen[2]) != (sid, value) or (seen[1] is not None and seen[1] != mid):
                report.content_problems.append(Problem(
                    "prediction", pid, f"value, spectrum or model differs from what audit event "
                                       f"{seen[3]} recorded (altered)", event=seen[3]))
    for pid, seen in sorted(recorded.items()):
        report.content_problems.append(Problem(
            "prediction", pid, f"recorded by audit event {seen[3]} but no longer in the "
                               "registry (deleted)", event=seen[3]))
    report.checked["prediction"] = n


def _name_samples(session: Session, report: VerifyReport, spectrum_sample: dict[int, int],
                  result_sample: dict[tuple[str, int], int]) -> None:
    wanted = set(spectrum_sample.values()) | set(result_sample.values())
    if not wanted:
        return
    names: dict[int, str] = {}
    ids = sorted(wanted)
    for part in in_blocks(ids):
        for sid, ext in session.execute(select(Sample.id, Sample.external_id)
                                        .where(Sample.id.in_(part))):
            names[sid] = ext
    for p in report.content_problems:
        sample_id = (spectrum_sample.get(p.entity_id) if p.entity_type == "spectrum"
                     else result_sample.get((p.entity_type, p.entity_id)))
        if sample_id is not None and not p.label:
            p.label = f"sample {names.get(sample_id, sample_id)}"


def verify_registry(session: Session) -> VerifyReport:
    """Verify the audit chain and every content hash it vouches for.

    Returns a :class:`VerifyReport`; ``intact`` is False if any link is broken
    or any entity's stored content differs from its hash or from the hash the
    chain vouched for. Reads only.
    """
    started = time.perf_counter()
    report = VerifyReport()
    vouched = _Vouched()
    _walk_chain(session, report, vouched)
    spectrum_sample: dict[int, int] = {}
    result_sample: dict[tuple[str, int], int] = {}
    _check_spectra(session, report, vouched, spectrum_sample)
    _check_reference_results(session, report, vouched, result_sample)
    _check_calibration_sets(session, report, vouched)
    _check_models(session, report, vouched)
    _check_validations(session, report, vouched)
    _check_signatures(session, report, vouched)
    _check_predictions(session, report, vouched)
    # What the chain vouched for but is no longer stored: deleted behind the registry's back.
    for kind in HASHED_KINDS:
        for entity_id, (_, seq) in sorted(vouched.hashes[kind].items()):
            report.content_problems.append(Problem(
                kind, entity_id, f"vouched for by audit event {seq} but no longer in the "
                                 "registry (deleted)", event=seq))
    _name_samples(session, report, spectrum_sample, result_sample)
    report.seconds = time.perf_counter() - started
    return report
