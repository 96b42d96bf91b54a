"""What a reviewer reads before validating or approving a model version.

Read-only: the review queue, one version's evidence (cross-validated and
validation predictions against reference, residuals, the RMSECV curve, the
statistics beside the reference method's precision), two versions compared, and
whether the signed-in user may approve a version (with the reason in people's
names when not). Every function checks ``view``; nothing is written or audited.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np
from sqlmodel import Session, select

from ..catalog import precision_at
from ..chemometrics.validation import precision_summary
from ..errors import PermissionDenied
from ..lifecycle.permissions import LIFECYCLE_PERMISSIONS, Action, is_allowed
from ..lifecycle.states import (LifecycleAction, ModelState, allowed_actions,
                                check_separation_of_duties)
from ..precision import sd_from_limit
from ..spectra.axes import on_axis
from ..storage.lookups import get_model
from ..storage.models import (CalibrationSet, Grade, ModelStateChange,
                              ModelVersion, Property, ReferenceMethod, Sample, Spectrum, User,
                              ValidationRecord)
from ..storage.spectra_store import axis_values
from ..storage.types import as_utc
from .calibration import calibration_data, members_of
from .context import Actor, authorize
from .models import load_trained

#: States in which a version waits for a reviewer: validation (draft) or approval (in review).
WAITING = {ModelState.DRAFT: "validation", ModelState.IN_REVIEW: "approval"}


def _names(session: Session) -> dict[int, str]:
    return {u.id: (u.full_name or u.name) for u in session.exec(select(User)).all()}


# --------------------------------------------------------------------------- queue
def review_queue(session: Session, actor: Actor) -> list[dict[str, Any]]:
    """Versions waiting for validation (draft) or approval (in review), oldest wait first.

    A version has waited since it entered its state (its last state change, else
    its creation).
    """
    authorize(actor, Action.VIEW)
    names = _names(session)
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    out = []
    for mv in session.exec(select(ModelVersion).where(
            ModelVersion.state.in_(list(WAITING)))).all():
        last = session.exec(select(ModelStateChange.occurred_at).where(
            ModelStateChange.model_version_id == mv.id)
            .order_by(ModelStateChange.id.desc())).first()
        since = as_utc(last or mv.created_at)
        out.append({"label": mv.label, "property": props[mv.property_id],
                    "grade": grades.get(mv.grade_id), "state": mv.state,
                    "waiting_for": WAITING[mv.state], "since": since,
                    "author": names.get(mv.author_id)})
    return sorted(out, key=lambda r: (r["since"], r["label"]))


# --------------------------------------------------------------------------- approval rule
def separation_refusal(session: Session, actor: Actor, mv: ModelVersion,
                       action: LifecycleAction) -> str | None:
    """Why ``actor`` may not make ``action`` on ``mv`` by the four-eyes rule
    (:func:`registry.lifecycle.states.check_separation_of_duties`), naming people; None if allowed."""
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    creator = cs.created_by_id if cs else None
    try:
        check_separation_of_duties(action, actor.id, mv.author_id, creator)
    except PermissionDenied:
        names = _names(session)
        author = names.get(mv.author_id, "its author")
        if action is LifecycleAction.SUBMIT:
            return f"only its author, {author}, may submit {mv.label} for review"
        if actor.id == mv.author_id:
            return (f"{names.get(actor.id)} is the author of {mv.label}, so another reviewer "
                    "approves it (separation of duties)")
        return (f"{names.get(actor.id)} created calibration set {cs.name}, on which {mv.label} "
                "was trained, so another reviewer approves it (separation of duties)")
    return None


def approval_status(session: Session, actor: Actor, label: str) -> dict[str, Any]:
    """May ``actor`` approve ``label`` now? ``{"allowed": bool, "reason": str | None}``."""
    authorize(actor, Action.VIEW)
    mv = get_model(session, label)
    if LifecycleAction.APPROVE not in allowed_actions(mv.state):
        return {"allowed": False, "reason": f"{mv.label} is {mv.state}; only a version in "
                                           "review can be approved"}
    if not is_allowed(actor.roles, LIFECYCLE_PERMISSIONS[LifecycleAction.APPROVE]):
        return {"allowed": False, "reason": "approving is a reviewer's task; your roles do not "
                                           "include it"}
    reason = separation_refusal(session, actor, mv, LifecycleAction.APPROVE)
    return {"allowed": reason is None, "reason": reason}


# --------------------------------------------------------------------------- evidence
def _first_acquired(session: Session, spectrum_ids: list[int]) -> dict[int, datetime]:
    return {sid: as_utc(t) for sid, t in session.exec(select(Spectrum.id, Spectrum.acquired_at)
                                                      .where(Spectrum.id.in_(spectrum_ids))).all()}


def _sample_names(session: Session, ids) -> dict[int, str]:
    return dict(session.exec(select(Sample.id, Sample.external_id)
                             .where(Sample.id.in_(list(set(ids))))).all())


def method_precision(session: Session, prop_id: int, level: float | None) -> dict[str, Any]:
    """The active reference method's r, R, σ_r = r/2.77 and σ_R = R/2.77 (ISO 5725-6)
    at ``level``."""
    m = session.exec(select(ReferenceMethod).where(ReferenceMethod.property_id == prop_id,
                                                   ReferenceMethod.active == True)  # noqa: E712
                     .order_by(ReferenceMethod.id)).first()
    if m is None or level is None:
        return {"method": m.code if m else None, "level": level, "r": None, "R": None,
                "sigma_r": None, "sigma_R": None}
    r, R = precision_at(m.repeatability, level), precision_at(m.reproducibility, level)
    return {"method": m.code, "level": level, "r": r, "R": R,
            "sigma_r": sd_from_limit(r) if r else None, "sigma_R": sd_from_limit(R) if R else None}


def _cross_validated(session: Session, mv: ModelVersion, trained, cs: CalibrationSet) -> dict | None:
    """Cross-validated ŷ at the chosen size, one per calibration spectrum, as stored at
    training (the artifact keeps every fold's predictions); None when the artifact has no
    CV record or its rows no longer match the frozen set."""
    cv = trained.cv
    if cv is None:
        return None
    y, groups, members = _calibration_rows(session, cs)
    if cv.predictions.shape[0] != y.shape[0]:
        return None
    A = mv.n_components
    ids = [int(s) for m in members for s in m.spectrum_ids]
    acquired = _first_acquired(session, ids)
    names = _sample_names(session, groups.tolist())
    return {"sample": [names[g] for g in groups.tolist()], "spectrum_id": ids,
            "acquired_at": [acquired[i] for i in ids], "reference": y,
            "predicted": np.asarray(cv.predictions[:, A - 1], dtype=np.float64),
            "fold": np.asarray(cv.fold_of_sample)}


def _calibration_rows(session: Session, cs: CalibrationSet):
    """Reference values, sample ids and members of the calibration rows in the order
    training saw them (:func:`registry.services.calibration.calibration_data`), without
    loading the spectra."""
    members = members_of(session, cs, "cal")
    y = [m.reference_value for m in members for _ in m.spectrum_ids]
    groups = [m.sample_id for m in members for _ in m.spectrum_ids]
    return np.asarray(y, dtype=np.float64), np.asarray(groups), members


def _validation_set(session: Session, trained, cs: CalibrationSet) -> dict | None:
    """The validation members of the version's own set predicted now (replicates
    averaged per sample, as :func:`registry.services.models.validate_model` does)."""
    if not members_of(session, cs, "val"):
        return None
    X, _, groups, axis_row, members = calibration_data(session, cs, "val")
    X = on_axis(X, axis_values(axis_row), trained.axis)
    y_spec, _ = trained.predict(X)
    order = list(dict.fromkeys(groups.tolist()))
    ref = {m.sample_id: m.reference_value for m in members}
    first = {m.sample_id: int(m.spectrum_ids[0]) for m in members}
    acquired = _first_acquired(session, list(first.values()))
    names = _sample_names(session, order)
    return {"sample": [names[g] for g in order],
            "acquired_at": [acquired[first[g]] for g in order],
            "reference": np.array([ref[g] for g in order], dtype=np.float64),
            "predicted": np.array([y_spec[groups == g].mean() for g in order])}


def _warnings(session: Session, mv: ModelVersion) -> list[str]:
    out = []
    same = session.exec(select(ModelVersion.label).where(
        ModelVersion.artifact_sha256 == mv.artifact_sha256, ModelVersion.id != mv.id)
        .order_by(ModelVersion.id)).all()
    if same:
        out.append(f"The artifact of {mv.label} is byte-identical (same SHA-256) to "
                   f"{', '.join(same)}: it is not a new model.")
    reused = session.exec(select(ModelVersion.label).where(
        ModelVersion.calibration_set_id == mv.calibration_set_id, ModelVersion.id != mv.id)
        .order_by(ModelVersion.id)).all()
    if reused:
        cs = session.get(CalibrationSet, mv.calibration_set_id)
        out.append(f"Calibration set {cs.name} was also used by {', '.join(reused)}.")
    return out


def model_evidence(session: Session, actor: Actor, label: str) -> dict[str, Any]:
    """The evidence of one version, for the reviewer.

    Returns
    -------
    dict
        ``label, property, unit, family, components, state, author``;
        ``cv_curve`` (RMSECV per component count, the chosen size, the rule);
        ``cross_validation`` (per calibration spectrum: sample, acquired_at,
        reference, predicted at the chosen size, fold; or None);
        ``validation_set`` (per validation sample, predicted now; or None);
        ``precision`` (the reference method's r, R, σ_R at the mean reference level);
        ``latest_validation`` (its statistics, rule and verdict; or None);
        ``warnings`` (shared artifact hash, reused calibration set).
    """
    authorize(actor, Action.VIEW)
    mv = get_model(session, label)
    prop = session.get(Property, mv.property_id)
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    trained = load_trained(mv)
    cv = _cross_validated(session, mv, trained, cs)
    val = _validation_set(session, trained, cs)
    rec = session.exec(select(ValidationRecord).where(ValidationRecord.model_version_id == mv.id)
                       .order_by(ValidationRecord.id.desc())).first()
    names = _names(session)
    level_of = val if val is not None else cv
    level = float(np.mean(level_of["reference"])) if level_of is not None else None
    latest = None
    if rec is not None:
        latest = {"id": rec.id, "kind": rec.kind, "n": rec.n, "passed": rec.passed,
                  "reasons": list(rec.reasons or []), "at": as_utc(rec.created_at),
                  "by": names.get(rec.user_id), "bias_p": rec.bias_p, "r2": rec.r2,
                  "slope": rec.slope, "intercept": rec.intercept,
                  **precision_summary(rec.statistics, rec.criteria)}
    curve = mv.cv or {}
    return {"label": mv.label, "property": prop.code, "unit": prop.unit, "family": mv.family,
            "components": mv.n_components, "state": mv.state,
            "author": names.get(mv.author_id),
            "cv_curve": {"rmsecv": list(curve.get("rmsecv") or []), "chosen": mv.n_components,
                         "rule": curve.get("selection_rule"), "method": curve.get("method"),
                         "n_folds": curve.get("n_folds")},
            "cross_validation": cv, "validation_set": val,
            "precision": method_precision(session, mv.property_id, level),
            "latest_validation": latest, "warnings": _warnings(session, mv)}


# --------------------------------------------------------------------------- compare
def _set_summary(session: Session, cs: CalibrationSet) -> dict[str, Any]:
    cal = members_of(session, cs, "cal")
    values = [m.reference_value for m in cal]
    return {"name": cs.name, "sha256": cs.sha256, "n_cal": len(cal),
            "n_val": len(members_of(session, cs, "val")),
            "range": [min(values), max(values)] if values else None,
            "samples": {m.sample_id for m in cal}}


def compare_versions(session: Session, actor: Actor, label_a: str, label_b: str) -> dict[str, Any]:
    """Two versions side by side: statistics, CV curves and calibration-set differences.

    ``added``/``removed`` are the calibration samples of B not in A and of A not in B.
    """
    authorize(actor, Action.VIEW)
    out: dict[str, Any] = {}
    sets = {}
    names = _names(session)
    for key, label in (("a", label_a), ("b", label_b)):
        mv = get_model(session, label)
        cs = session.get(CalibrationSet, mv.calibration_set_id)
        sets[key] = _set_summary(session, cs)
        rec = session.exec(select(ValidationRecord).where(
            ValidationRecord.model_version_id == mv.id).order_by(ValidationRecord.id.desc())).first()
        rmsecv = list((mv.cv or {}).get("rmsecv") or [])
        out[key] = {"label": mv.label, "state": mv.state, "family": mv.family,
                    "components": mv.n_components, "author": names.get(mv.author_id),
                    "artifact_sha256": mv.artifact_sha256, "rmsecv": rmsecv,
                    "rmsecv_at_chosen": rmsecv[mv.n_components - 1] if rmsecv else None,
                    "validation": (None if rec is None else {
                        "passed": rec.passed, "n": rec.n, "r2": rec.r2,
                        **precision_summary(rec.statistics, rec.criteria)}),
                    "calibration_set": {k: v for k, v in sets[key].items() if k != "samples"}}
    added = sets["b"]["samples"] - sets["a"]["samples"]
    removed = sets["a"]["samples"] - sets["b"]["samples"]
    label = _sample_names(session, added | removed) if added | removed else {}
    out["added"] = sorted(label[s] for s in added)
    out["removed"] = sorted(label[s] for s in removed)
    out["same_set"] = sets["a"]["sha256"] == sets["b"]["sha256"]
    return out
