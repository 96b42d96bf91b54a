"""How each kind of registry record is content-hashed.

One function per kind, used when the record is written (the hash goes into
the record and into the audit event that created it) and again by
``audit verify``, which recomputes it from the stored content. A hash covers
what the record says, never storage details such as row order.
"""

from __future__ import annotations

import numpy as np

from ..spectra.record import content_sha256
from ..storage.models import (CalibrationMember, CalibrationSet, ReferenceResult, Signature,
                              SpectralAxis, Spectrum, ValidationRecord)
from .canonical import content_hash, sha256_hex


def spectrum_hash(spectrum: Spectrum, axis: SpectralAxis) -> str:
    """SHA-256 of the float64 axis bytes followed by the float32 data bytes."""
    return content_sha256(np.frombuffer(axis.values, dtype="<f8"),
                          np.frombuffer(spectrum.data, dtype="<f4"))


def reference_result_hash(r: ReferenceResult) -> str:
    return content_hash({"sample_id": r.sample_id, "method_id": r.method_id, "value": r.value,
                         "lab": r.lab, "tested_at": r.tested_at, "operator": r.operator,
                         "supersedes_id": r.supersedes_id})


def calibration_set_hash(cs: CalibrationSet, members: list[CalibrationMember]) -> str:
    rows = sorted([m.sample_id, m.role, m.reference_value, sorted(m.reference_result_ids),
                   sorted(m.spectrum_ids)] for m in members)
    return content_hash({"name": cs.name, "property_id": cs.property_id, "grade_id": cs.grade_id,
                         "validation_rule": cs.validation_rule, "members": rows})


def artifact_hash(artifact: bytes) -> str:
    return sha256_hex(bytes(artifact))


def validation_record_hash(v: ValidationRecord) -> str:
    return content_hash({"model_version_id": v.model_version_id,
                         "calibration_set_id": v.calibration_set_id, "kind": v.kind,
                         "statistics": v.statistics, "criteria": v.criteria,
                         "passed": v.passed, "reasons": v.reasons})


def signature_hash(s: Signature) -> str:
    return content_hash({"user_id": s.user_id, "meaning": s.meaning, "reason": s.reason,
                         "signed_at": s.signed_at, "entity_type": s.entity_type,
                         "entity_id": s.entity_id, "signed_parts": s.signed_parts,
                         "signed_sha256": s.signed_sha256})
