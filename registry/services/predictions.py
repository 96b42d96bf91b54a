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
from ..storage.spectra_store import existing_hashes
from ..storage.revalidation_store import due_status_of, open_triggers, policy_for
from ..storage.types import utcnow
from .context import Actor, audit, authorize
from ..chemometrics.fitted import load_fitted
from ..plain_json import plain_json
from .models import assess_spectra, get_model, input_model

#: Checks that say a spectrum lies outside the calibration space (ASTM E1655, from memory); the y-range check is about
#: the predicted value, not the spectrum, so it is not one of them.
SPACE_FLAGS = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour",
               # the other families' spectrum checks of the same kind (band value or baseline
               # outside the calibration range, CLS residual above its limit)
               "band_range", "baseline_anchor", "residual")


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
    return PredictionBatch(model=mv.label, predictions=store_predictions(session, actor, mv, spectra))


def _input_predictions(session: Session, actor: Actor, mv: ModelVersion, code: str,
                       spectra: list[Spectrum]) -> tuple[ModelVersion, np.ndarray, list[dict]]:
    """The results of input ``code`` for these spectra: the input version's stored
    prediction of each spectrum when there is one, else a new one (stored and audited
    like any prediction). Returns (input version, values, {prediction_id, value, flags})."""
    imv = input_model(session, mv, code)
    found: dict[int, Prediction] = {}
    for p in session.exec(select(Prediction).where(
            Prediction.model_version_id == imv.id,
            Prediction.spectrum_id.in_([sp.id for sp in spectra]))
            .order_by(Prediction.id)).all():
        found[p.spectrum_id] = p  # the latest one wins
    todo = [sp for sp in spectra if sp.id not in found]
    made = {d["spectrum_id"]: d for d in store_predictions(session, actor, imv, todo)} if todo else {}
    links = []
    for sp in spectra:
        if sp.id in found:
            p = found[sp.id]
            links.append({"prediction_id": p.id, "value": p.value, "flags": list(p.flags)})
        else:
            d = made[sp.id]
            links.append({"prediction_id": d["id"], "value": d["value"], "flags": d["flags"]})
    values = np.array([np.nan if d["value"] is None else d["value"] for d in links])
    return imv, values, links


def store_predictions(session: Session, actor: Actor, mv: ModelVersion,
                      spectra: list[Spectrum]) -> list[dict]:
    """Assess ``spectra`` with ``mv`` (any family), store and audit the results.

    Input results a version combines are taken from (or stored as) predictions of the
    input versions for the same spectra; each result names them (``inputs``). A result
    without a value (a family may give none, e.g. no similar sample near enough) is
    reported and audited but not stored as a prediction.
    """
    model = load_fitted(mv.artifact, mv.artifact_sha256)
    given, links = {}, {}
    for code in model.inputs:
        imv, values, links[code] = _input_predictions(session, actor, mv, code, spectra)
        given[code] = (imv, values)
    assessed = assess_spectra(session, mv, [s.id for s in spectra], inputs=given, model=model)
    standing: dict[int, list[str]] = {}
    now = utcnow()
    out = []
    for k, (sp, rec) in enumerate(zip(spectra, assessed.records)):
        if sp.instrument_id not in standing:  # once per instrument, not per spectrum
            standing[sp.instrument_id] = standing_flags(session, mv, sp.instrument_id)
        flags = list(rec["flags"]) + standing[sp.instrument_id]
        diagnostics = {key: v for key, v in rec.items() if key != "flags"}
        if links:
            diagnostics["inputs"] = {code: {**assessed.inputs[code], **{
                key: links[code][k][key] for key in ("prediction_id", "value", "flags")}}
                for code in links}
            if any(links[code][k]["flags"] for code in links):
                flags.append("input_flagged")
        value = float(assessed.y[k])
        pid = None
        if np.isfinite(value):
            p = Prediction(spectrum_id=sp.id, model_version_id=mv.id,
                           instrument_id=sp.instrument_id, value=value,
                           diagnostics=plain_json(diagnostics), flags=flags, predicted_at=now,
                           user_id=actor.id)
            session.add(p)
            session.flush()
            pid = p.id
        sample = session.get(Sample, sp.sample_id)
        out.append({"id": pid, "spectrum_id": sp.id, "sample": sample.external_id,
                    "value": value if pid is not None else None, "flags": flags,
                    "diagnostics": plain_json(diagnostics)})
    audit(session, actor, Action.PREDICT, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "family": mv.family.value,
                "predictions": [[d["id"], d["spectrum_id"], d["value"], d["flags"]]
                                for d in out]})
    check_coverage_drift(session, mv)
    return out


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
