"""Predictions: value, diagnostics and flags for each spectrum, stored with the model version.

Applicability is never assumed: every prediction carries the flags of the
prediction-time checks (leverage, Hotelling T², Q residual, nearest neighbour,
calibration y-range) and of the model's standing (not in service on that
instrument, overdue for revalidation, open QC signal).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from sqlmodel import Session, select

from ..errors import InputError, NotFoundError, StateError
from ..lifecycle.permissions import Action
from ..lifecycle.revalidation_rules import coverage_drift
from ..lifecycle.states import DeploymentState, ModelState, is_terminal
from ..storage.models import (Deployment, Instrument, ModelVersion, Prediction, RevalidationTrigger,
                              Sample, Spectrum)
from ..spectra.record import content_sha256_rows
from ..storage.spectra_store import existing_hashes, load_on_axis
from ..storage.revalidation_store import due_status_of, open_triggers, policy_for
from ..storage.types import utcnow
from .context import Actor, audit, authorize
from .models import get_model, load_trained

#: Checks that say a spectrum lies outside the calibration space (ASTM E1655, from memory); the y-range check is about
#: the predicted value, not the spectrum, so it is not one of them.
SPACE_FLAGS = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour")


@dataclass
class PredictionBatch:
    model: str
    predictions: list[dict] = field(default_factory=list)


def standing_flags(session: Session, mv: ModelVersion, instrument_id: int) -> list[str]:
    """Flags that come from the model's state rather than from the spectrum."""
    flags = []
    deployed = session.exec(select(Deployment.id).where(
        Deployment.model_version_id == mv.id, Deployment.instrument_id == instrument_id,
        Deployment.state == DeploymentState.ACTIVE)).first()
    if mv.state != ModelState.ACTIVE or deployed is None:
        flags.append("not_in_service")
    status = due_status_of(session, mv)
    if status is not None and status.overdue:
        flags.append("overdue")
    serial = session.get(Instrument, instrument_id).serial
    for t in open_triggers(session, mv):
        if t.kind == "qc_signal" and (t.detail or {}).get("instrument") in (None, serial):
            flags.append("qc_signal")
            break
    return flags


def predict(session: Session, actor: Actor, label: str, *, spectrum_ids: list[int] | None = None,
            files: list[str | Path] | None = None, instrument: str | None = None,
            on_duplicate: str = "skip") -> PredictionBatch:
    """Predict stored spectra, or spectra from files (imported in the same transaction)."""
    authorize(actor, Action.PREDICT)
    mv = get_model(session, label)
    if is_terminal(mv.state):
        raise StateError(f"model {mv.label} is {mv.state}; it no longer predicts")
    if bool(spectrum_ids) == bool(files):
        raise InputError("give either stored spectrum ids or spectrum files", field="--spectrum")
    if files:
        from .intake import import_spectra

        summary = import_spectra(session, actor, list(files), instrument=instrument,
                                 on_duplicate="error" if on_duplicate == "error" else "skip")
        spectrum_ids = list(summary.spectrum_ids)
        if summary.skipped:
            spectrum_ids += _existing_ids_for(session, files)
    spectra = [session.get(Spectrum, int(i)) for i in spectrum_ids]
    missing = [i for i, s in zip(spectrum_ids, spectra) if s is None]
    if missing:
        raise NotFoundError(f"unknown spectrum id(s): {', '.join(map(str, missing[:10]))}")
    trained = load_trained(mv)
    batch = PredictionBatch(model=mv.label)
    y, diag = trained.predict(load_on_axis(session, [s.id for s in spectra], trained.axis))
    rows: list[tuple[Spectrum, float, dict, list[str]]] = []
    standing: dict[int, list[str]] = {}
    for k, (sp, rec) in enumerate(zip(spectra, diag.records())):
        if sp.instrument_id not in standing:  # once per instrument, not per spectrum
            standing[sp.instrument_id] = standing_flags(session, mv, sp.instrument_id)
        flags = list(rec["flags"]) + standing[sp.instrument_id]
        rows.append((sp, float(y[k]), rec, flags))
    now = utcnow()
    for sp, value, rec, flags in rows:
        p = Prediction(spectrum_id=sp.id, model_version_id=mv.id, instrument_id=sp.instrument_id,
                       value=value, diagnostics={k: v for k, v in rec.items() if k != "flags"},
                       flags=flags, predicted_at=now, user_id=actor.id)
        session.add(p)
        session.flush()
        sample = session.get(Sample, sp.sample_id)
        batch.predictions.append({"id": p.id, "spectrum_id": sp.id, "sample": sample.external_id,
                                  "value": value, "flags": flags, "diagnostics": p.diagnostics})
    audit(session, actor, Action.PREDICT, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "predictions": [[d["id"], d["spectrum_id"], d["value"], d["flags"]]
                                                   for d in batch.predictions]})
    check_coverage_drift(session, mv)
    return batch


def _existing_ids_for(session: Session, files) -> list[int]:
    """Ids of already-stored spectra identical to those in ``files`` (duplicates skipped on import)."""
    from .intake import expand_paths, read_batches

    digests = []
    for path in expand_paths(list(files)):
        for b in read_batches(path):
            digests += content_sha256_rows(b.axis, b.Y)
    found = existing_hashes(session, digests)
    return [found[d] for d in digests if d in found]


def check_coverage_drift(session: Session, mv: ModelVersion) -> RevalidationTrigger | None:
    """Raise a coverage-drift trigger when too many recent predictions fall outside the space."""
    if mv.state != ModelState.ACTIVE:
        return None
    policy = policy_for(session, mv)
    from datetime import timedelta

    since = utcnow() - timedelta(days=policy.coverage_window_days)
    recent = session.exec(select(Prediction.flags).where(
        Prediction.model_version_id == mv.id, Prediction.predicted_at >= since)).all()
    outside = [any(f in SPACE_FLAGS for f in flags) for flags in recent]
    if not outside:
        return None
    drifted, share = coverage_drift(np.array(outside), threshold=policy.coverage_threshold,
                                    min_count=policy.coverage_min_count)
    if not drifted:
        return None
    if any(t.kind == "coverage_drift" for t in open_triggers(session, mv)):
        return None
    trig = RevalidationTrigger(model_version_id=mv.id, kind="coverage_drift",
                               detail={"share": round(float(share), 4), "window_days":
                                       policy.coverage_window_days, "n": len(outside),
                                       "threshold": policy.coverage_threshold})
    session.add(trig)
    session.flush()
    audit(session, None, Action.TRIGGER_RAISE, entity_type="model_version", entity_id=mv.id,
          data={"kind": "coverage_drift", "share": float(share), "n": len(outside)})
    return trig
