"""What a reviewer reads before validating or approving a model version.

Read-only: the review queue, one version's evidence (validation predictions
against reference, residuals, the statistics beside the reference method's
precision and the verdict, for every family; the cross-validated predictions and
RMSECV curve a PLS version stores; each family's own evidence from its fitted
artifact), one spectrum's evidence (the family's breakdown of one result), two
versions compared, and whether the signed-in user may approve a version (with the
reason in people's names when not). Every function checks ``view``; nothing is
written or audited. Family evidence comes from the fitted interface
(:meth:`registry.chemometrics.fitted.FittedModel.evidence` and ``explain``): no
code here asks which family a version is.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np
from sqlmodel import Session, select

from ..catalog import precision_at
from ..chemometrics.validation import precision_summary
from ..errors import NotFoundError, PermissionDenied, StateError
from ..lifecycle.permissions import LIFECYCLE_PERMISSIONS, Action, is_allowed
from ..lifecycle.states import (LifecycleAction, ModelState, allowed_actions,
                                check_separation_of_duties)
from ..precision import sd_from_limit
from ..chemometrics.fitted import FittedModel, load_fitted
from ..storage.lookups import get_model
from ..storage.models import (CalibrationSet, Grade, ModelStateChange,
                              ModelVersion, Prediction, Property, ReferenceMethod, Sample,
                              Spectrum, User, ValidationRecord)
from ..storage.spectra_store import load_on_axis
from ..storage.types import as_utc
from .calibration import members_of
from .context import Actor, authorize
from .lifecycle import latest_passing_record
from .models import assess_spectra, input_model, input_values, sample_means

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


def _cross_validated(session: Session, mv: ModelVersion, model: FittedModel,
                     cs: CalibrationSet) -> dict | None:
    """Cross-validated ŷ at the chosen size, one per calibration spectrum, as stored at
    training (a PLS artifact keeps every fold's predictions); None when the family stores
    no cross-validation or its rows no longer match the frozen set."""
    cv = model.cross_validation
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


def _validation_set(session: Session, mv: ModelVersion, model: FittedModel,
                    cs: CalibrationSet) -> dict | None:
    """The validation members of the version's own set predicted now by the version's
    family (replicates averaged per sample, as
    :func:`registry.services.models.validate_model` does; NaN where the family gives no
    value)."""
    members = members_of(session, cs, "val")
    if not members:
        return None
    spectrum_ids = [int(sid) for m in members for sid in m.spectrum_ids]
    groups = np.array([m.sample_id for m in members for _ in m.spectrum_ids])
    y_spec = assess_spectra(session, mv, spectrum_ids, model=model).y
    order, predicted = sample_means(y_spec, groups)
    ref = {m.sample_id: m.reference_value for m in members}
    first = {m.sample_id: int(m.spectrum_ids[0]) for m in members}
    acquired = _first_acquired(session, list(first.values()))
    names = _sample_names(session, order)
    return {"sample": [names[g] for g in order], "spectrum_id": [first[g] for g in order],
            "acquired_at": [acquired[first[g]] for g in order],
            "reference": np.array([ref[g] for g in order], dtype=np.float64),
            "predicted": predicted}


def _input_versions(session: Session, mv: ModelVersion, model: FittedModel,
                    trained_with: dict[str, Any]) -> list[dict[str, Any]]:
    """Each input property of a version that combines other results: the version its
    results come from now, that version's SEP (latest passing validation), and the
    version and SEP recorded at training (which the propagated uncertainty uses)."""
    out = []
    for code in model.inputs:
        was = trained_with.get(code) or {}
        try:
            now = input_model(session, mv, code)
        except StateError:  # no version of the input in use: say so, the rest still shows
            now = None
        rec = latest_passing_record(session, now) if now is not None else None
        out.append({"code": code, "current": now.label if now else None,
                    "current_family": now.family if now else None,
                    "current_state": now.state if now else None,
                    "current_sep": rec.sep if rec else None,
                    "trained_with": was.get("label"), "sep_at_training": was.get("sep"),
                    "changed": now is None or was.get("label") != now.label})
    return out


#: Recent predictions offered for a version's per-spectrum evidence.
RECENT_PREDICTIONS = 20


def _evidence_spectra(session: Session, mv: ModelVersion, cs: CalibrationSet,
                      val: dict | None) -> list[dict[str, Any]]:
    """Spectra whose family evidence a reviewer may open: a typical calibration sample
    (its reference value nearest the calibration median), the validation samples and the
    version's recent predictions."""
    out = []
    cal = members_of(session, cs, "cal")
    if cal:
        refs = np.array([m.reference_value for m in cal], dtype=np.float64)
        typical = cal[int(np.argmin(np.abs(refs - np.median(refs))))]
        name = _sample_names(session, [typical.sample_id])[typical.sample_id]
        out.append({"kind": "calibration", "spectrum_id": int(typical.spectrum_ids[0]),
                    "sample": name, "reference": typical.reference_value,
                    "label": f"typical calibration sample {name} (reference "
                             f"{typical.reference_value:g}, nearest the median)"})
    if val is not None:
        out += [{"kind": "validation", "spectrum_id": sid, "sample": name, "reference": float(r),
                 "label": f"validation sample {name} (reference {r:g})"}
                for sid, name, r in zip(val["spectrum_id"], val["sample"], val["reference"])]
    preds = session.exec(select(Prediction).where(Prediction.model_version_id == mv.id)
                         .order_by(Prediction.id.desc()).limit(RECENT_PREDICTIONS)).all()
    if preds:
        sample_of = dict(session.exec(select(Spectrum.id, Spectrum.sample_id).where(
            Spectrum.id.in_([p.spectrum_id for p in preds]))).all())
        names = _sample_names(session, sample_of.values())
        out += [{"kind": "prediction", "spectrum_id": p.spectrum_id, "prediction_id": p.id,
                 "sample": names[sample_of[p.spectrum_id]], "reference": None,
                 "label": f"prediction {p.id} of {names[sample_of[p.spectrum_id]]} "
                          f"({'no value' if p.value is None else f'{p.value:g}'})"}
                for p in preds]
    return out


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
        ``label, property, unit, family, description, components, state, author``;
        ``cv_curve`` (RMSECV per component count, the chosen size, the rule; empty
        for a family without cross-validation);
        ``cross_validation`` (per calibration spectrum: sample, acquired_at,
        reference, predicted at the chosen size, fold; or None);
        ``validation_set`` (per validation sample, predicted now by any family; or None);
        ``precision`` (the reference method's r, R, σ_R at the mean reference level);
        ``latest_validation`` (its statistics, rule and verdict; or None);
        ``family_evidence`` (the fitted model's own evidence, see
        :meth:`~registry.chemometrics.fitted.FittedModel.evidence`);
        ``inputs`` (a version combining other results: each input's current version
        and SEP beside those recorded at training; else empty);
        ``spectra`` (spectra whose evidence :func:`spectrum_evidence` explains);
        ``warnings`` (shared artifact hash, reused calibration set).
    """
    authorize(actor, Action.VIEW)
    mv = get_model(session, label)
    prop = session.get(Property, mv.property_id)
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    model = load_fitted(mv.artifact, mv.artifact_sha256)
    cv = _cross_validated(session, mv, model, cs)
    warnings = _warnings(session, mv)
    try:
        val = _validation_set(session, mv, model, cs)
    except StateError as exc:  # an input property has no version in use: say why, show the rest
        val = None
        warnings.append(f"The validation set cannot be predicted now: {exc}.")
    family = model.evidence()
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
            "description": model.description, "components": mv.n_components, "state": mv.state,
            "author": names.get(mv.author_id),
            "cv_curve": {"rmsecv": list(curve.get("rmsecv") or []), "chosen": mv.n_components,
                         "rule": curve.get("selection_rule"), "method": curve.get("method"),
                         "n_folds": curve.get("n_folds")},
            "cross_validation": cv, "validation_set": val,
            "precision": method_precision(session, mv.property_id, level),
            "latest_validation": latest, "family_evidence": family,
            "inputs": _input_versions(session, mv, model, family.get("input_models") or {}),
            "spectra": _evidence_spectra(session, mv, cs, val), "warnings": warnings}


def spectrum_evidence(session: Session, actor: Actor, label: str,
                      spectrum_id: int) -> dict[str, Any]:
    """One spectrum's result by ``label`` with the family's own breakdown of it
    (:meth:`~registry.chemometrics.fitted.FittedModel.explain`): the band and its
    baseline, the CLS fit and residual, the inputs' shares of a derived uncertainty,
    or the neighbours a look-up took its value from (with their sample names).

    ``inputs_used`` names the version that gave each input result (derived only).
    """
    authorize(actor, Action.VIEW)
    mv = get_model(session, label)
    spectrum = session.get(Spectrum, int(spectrum_id))
    if spectrum is None:
        raise NotFoundError(f"no spectrum with id {spectrum_id}")
    model = load_fitted(mv.artifact, mv.artifact_sha256)
    X = load_on_axis(session, [spectrum.id], model.axis)
    values, used = input_values(session, mv, model, [spectrum.id])
    out = model.explain(X, values if model.inputs else None)
    if out.get("sample_ids"):
        names = _sample_names(session, out["sample_ids"])
        out["samples"] = [names[i] for i in out["sample_ids"]]
    sample = session.get(Sample, spectrum.sample_id)
    return {**out, "label": mv.label, "family": mv.family, "spectrum_id": spectrum.id,
            "sample": sample.external_id, "inputs_used": used}


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
