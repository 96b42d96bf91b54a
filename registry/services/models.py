"""Model versions: train from a frozen calibration set, validate, predict, list, show."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import func
from sqlalchemy.orm import object_session
from sqlmodel import Session, select

from ..catalog import precision_at
from ..chemometrics import AcceptanceCriteria, TrainedModel, validation_statistics, verdict
from ..chemometrics.artifact import q_limit_of
from ..chemometrics.family_names import ModelFamily
from ..chemometrics.fitted import DESCRIPTIONS, FittedModel, load_fitted
from ..chemometrics.validation import precision_summary
from ..errors import InputError, IntegrityError, NotFoundError, StateError
from ..lifecycle.permissions import Action
from ..lifecycle.states import (CURRENT_MODEL_PREFERENCE, IN_SERVICE_STATES, LifecycleAction,
                                ModelState, as_state, check_transition)
from ..lineage.content_hashes import artifact_hash, validation_record_hash
from ..storage.lookups import get_model
from ..storage.models import (CalibrationSet, Grade, ModelStateChange, ModelVersion, Property,
                              ReferenceMethod, ValidationRecord)
from ..storage.revalidation_store import clear_answered_triggers
from ..storage.spectra_store import axis_values, load_on_axis
from .calibration import calibration_data, get_calset, members_of
from .context import Actor, audit, authorize

# Default recipe: drop the atmospheric CO₂ band (a common-practice exclusion in mid-IR work),
# then a first-derivative Savitzky–Golay filter to remove baseline offsets.
CO2_BAND_CM1 = [2400, 2250]
DEFAULT_RECIPE: list[dict[str, Any]] = [
    {"step": "region", "exclude": [CO2_BAND_CM1]},
    {"step": "savgol", "window_length": 11, "polyorder": 2, "deriv": 1},
]


# Prediction-time limits (Hotelling T², Q residual) at 99 %: with four checks per spectrum,
# 95 % limits would flag about one in six routine spectra by chance (95 % and 99 % are both
# common practice).
DIAGNOSTICS_CONFIDENCE = 0.99
#: Validation kinds: the first validation of a version, local (one site or instrument) and
#: general (independent set covering the scope).
VALIDATION_KINDS = ("initial", "local", "general")


def current_model(session: Session, prop: Property, grade: Grade | None) -> ModelVersion | None:
    """The current model of ``prop`` on ``grade`` (None: the all-grades versions; see
    :data:`CURRENT_MODEL_PREFERENCE`), or None."""
    on_grade = (ModelVersion.grade_id == grade.id) if grade is not None \
        else ModelVersion.grade_id.is_(None)
    for states in CURRENT_MODEL_PREFERENCE:
        mv = session.exec(select(ModelVersion).where(
            ModelVersion.property_id == prop.id, on_grade,
            ModelVersion.state.in_(states)).order_by(ModelVersion.id.desc())).first()
        if mv is not None:
            return mv
    return None


def load_trained(mv: ModelVersion) -> TrainedModel:
    """A PLS version's arrays (its score space is what selection and the coverage views
    use), after checking the artifact against its recorded hash.

    A version of another family is refused, never replaced by an older PLS version of
    the property: a selection or coverage map drawn in a superseded model's space would
    look current while describing a model no longer in use. The message names the
    property, the family and what to do.
    """
    if mv.family != ModelFamily.PLS:
        session = object_session(mv)
        prop = session.get(Property, mv.property_id) if session is not None else None
        grade = (session.get(Grade, mv.grade_id)
                 if session is not None and mv.grade_id is not None else None)
        code = prop.code if prop is not None else "this property"
        on = f" on {grade.code}" if grade is not None else ""
        raise InputError(
            f"the model of {code}{on} is {mv.label}, a {mv.family.value} model "
            f"({DESCRIPTIONS[mv.family]}); selection and the coverage views work in a PLS "
            f"model's score space. Train a PLS version of {code} and choose it as the model, "
            "or select and map by another property that has a PLS model", field="model")
    return TrainedModel.from_bytes(mv.artifact, mv.artifact_sha256)


def _read_json_file(path: str | Path) -> Any:
    """A recipe or options file's JSON; errors name the file (and the line)."""
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read recipe: {exc}", file=str(path)) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON: {exc.msg}", file=str(path), line=exc.lineno) from None


def read_recipe(path: str | Path | None) -> list[dict[str, Any]]:
    if path is None:
        return DEFAULT_RECIPE
    doc = _read_json_file(path)
    if isinstance(doc, dict) and "steps" in doc:
        doc = doc["steps"]
    if not isinstance(doc, list):
        raise InputError("a recipe is a JSON list of steps", file=str(path))
    return doc


def read_options(path: str | Path | None) -> dict[str, Any]:
    """A family's options from a JSON object file (see :mod:`registry.services.trainers`)."""
    if path is None:
        return {}
    doc = _read_json_file(path)
    if not isinstance(doc, dict):
        raise InputError("a family recipe is a JSON object of options", file=str(path))
    return doc


def _next_label(session: Session, prop: Property, grade: Grade | None) -> str:
    stem = f"{prop.code}-{grade.code if grade else 'ALL'}"
    n = session.exec(select(func.count()).select_from(ModelVersion).where(
        ModelVersion.property_id == prop.id, ModelVersion.grade_id == (grade.id if grade else None))).one()
    label = f"{stem}-v{n + 1}"
    while session.exec(select(ModelVersion.id).where(ModelVersion.label == label)).first():
        n += 1
        label = f"{stem}-v{n + 1}"
    return label


def record_state_change(session: Session, mv: ModelVersion, to_state: ModelState,
                        actor: Actor | None, reason: str = "",
                        signature_id: int | None = None) -> ModelStateChange:
    """Move ``mv`` to ``to_state`` (taken from the transition table by the caller) and log it."""
    change = ModelStateChange(model_version_id=mv.id, from_state=mv.state, to_state=to_state,
                              user_id=actor.id if actor else mv.author_id, reason=reason,
                              signature_id=signature_id)
    mv.state = to_state
    session.add(mv)
    session.add(change)
    session.flush()
    return change


def train_model_version(session: Session, actor: Actor, calset_name: str, *,
                        family: str = ModelFamily.PLS, options: dict[str, Any] | None = None,
                        recipe: list[dict[str, Any]] | None = None,
                        max_components: int | None = None, folds: int | None = None,
                        cv_method: str | None = None, selection: str | None = None,
                        n_components: int | None = None, parent: str | None = None,
                        random_state: int | None = None) -> ModelVersion:
    """Train a draft model version of any family on the calibration members of a frozen set.

    ``family`` picks the trainer (:data:`registry.services.trainers.TRAINERS`);
    ``options`` are that family's options (see that module). The PLS keywords
    (``recipe``, ``max_components``, ...) are options too, kept as keywords for the PLS
    callers: given ones are merged into ``options``. For PLS, replicate spectra of one
    sample are kept in one cross-validation fold; folds default to venetian blinds over
    the samples, and ``random_state`` seeds ``cv_method="random"``.
    """
    from .trainers import TRAINERS, TrainingContext

    authorize(actor, Action.MODEL_TRAIN)
    family = as_family(family)
    keywords = {"recipe": recipe, "max_components": max_components, "folds": folds,
                "cv_method": cv_method, "selection": selection, "n_components": n_components,
                "random_state": random_state}
    if options is not None and not isinstance(options, dict):
        raise InputError("family options must be a JSON object", field="--recipe")
    options = {**{k: v for k, v in keywords.items() if v is not None}, **(options or {})}
    cs = get_calset(session, calset_name)
    prop = session.get(Property, cs.property_id)
    grade = session.get(Grade, cs.grade_id) if cs.grade_id else None
    parent_mv = get_model(session, parent) if parent else None
    if parent_mv is not None and parent_mv.property_id != prop.id:
        raise InputError(f"parent {parent_mv.label} models another property", field="--parent")
    X, y, groups, axis_row, members = calibration_data(session, cs, "cal")
    ctx = TrainingContext(session=session, calset=cs, prop=prop, grade=grade, X=X, y=y,
                          groups=groups, axis=axis_values(axis_row), members=members,
                          metadata={"property": prop.code, "unit": prop.unit,
                                    "grade": grade.code if grade else None,
                                    "calibration_set": cs.name,
                                    "calibration_set_sha256": cs.sha256})
    outcome = TRAINERS[family](ctx, options)
    blob = outcome.fitted.to_bytes()
    mv = ModelVersion(label=_next_label(session, prop, grade), property_id=prop.id,
                      grade_id=cs.grade_id, family=family, recipe=outcome.recipe,
                      n_components=outcome.n_parameters, cv=outcome.summary,
                      artifact=blob, artifact_sha256=artifact_hash(blob), axis_id=axis_row.id,
                      parent_id=parent_mv.id if parent_mv else None, calibration_set_id=cs.id,
                      state=ModelState.DRAFT, author_id=actor.id)
    session.add(mv)
    session.flush()
    audit(session, actor, Action.MODEL_TRAIN, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "family": family.value, "calibration_set": cs.name,
                "recipe": mv.recipe, **outcome.audit},
          hashes={"model_version": [(mv.id, mv.artifact_sha256)]})
    return mv


def as_family(name: str) -> ModelFamily:
    try:
        return ModelFamily(str(name).strip().lower())
    except ValueError:
        raise InputError(f"unknown model family {name!r}; known: "
                         + ", ".join(f.value for f in ModelFamily), field="--family") from None


@dataclass
class SpectraAssessment:
    """A version's values for stored spectra, with the input results it combined."""

    model: FittedModel
    y: np.ndarray
    records: list[dict]
    inputs: dict[str, dict] = field(default_factory=dict)


def input_model(session: Session, mv: ModelVersion, code: str) -> ModelVersion:
    """The version whose results feed input ``code`` of ``mv``: the current model of that
    property on ``mv``'s grade."""
    prop = session.exec(select(Property).where(Property.code == code)).first()
    if prop is None:
        raise NotFoundError(f"unknown input property {code!r} of model {mv.label}")
    grade = session.get(Grade, mv.grade_id) if mv.grade_id else None
    found = current_model(session, prop, grade)
    if found is None:
        raise StateError(f"input {code} of model {mv.label} has no validated, approved or "
                         "active model")
    return found


def assess_spectra(session: Session, mv: ModelVersion, spectrum_ids: list[int], *,
                   inputs: dict[str, tuple[ModelVersion, np.ndarray]] | None = None,
                   model: FittedModel | None = None, depth: int = 0) -> SpectraAssessment:
    """Values and check records of ``mv`` for stored spectra (any family).

    A version that combines other properties' results (``model.inputs``) gets them for
    the same spectra: from ``inputs`` (code -> (version, values)) when the caller has
    them, else from :func:`input_model`'s version, assessed the same way.
    """
    if model is None:
        model = load_fitted(mv.artifact, mv.artifact_sha256)
    X = load_on_axis(session, spectrum_ids, model.axis)
    values, used = input_values(session, mv, model, spectrum_ids, inputs=inputs, depth=depth)
    out = model.assess(X, values if model.inputs else None)
    return SpectraAssessment(model, out.y, out.records, used)


def input_values(session: Session, mv: ModelVersion, model: FittedModel,
                 spectrum_ids: list[int], *,
                 inputs: dict[str, tuple[ModelVersion, np.ndarray]] | None = None,
                 depth: int = 0) -> tuple[dict[str, np.ndarray], dict[str, dict]]:
    """The results of ``model.inputs`` for the spectra (code -> values) and the version
    that gave each (code -> label, id, artifact hash); empty for a model without inputs."""
    if depth > 8:
        raise InputError(f"model {mv.label}: inputs nest too deep (a formula cycle?)",
                         field="formula")
    given = dict(inputs or {})
    values, used = {}, {}
    for code in model.inputs:
        if code in given:
            imv, v = given[code]
        else:
            imv = input_model(session, mv, code)
            v = assess_spectra(session, imv, spectrum_ids, depth=depth + 1).y
        values[code] = v
        used[code] = {"model": imv.label, "model_version_id": imv.id,
                      "artifact_sha256": imv.artifact_sha256}
    return values, used


def _reproducibility_at(session: Session, prop: Property, level: float) -> float | None:
    method = session.exec(select(ReferenceMethod).where(ReferenceMethod.property_id == prop.id,
                                                        ReferenceMethod.active == True)  # noqa: E712
                          .order_by(ReferenceMethod.id)).first()
    return precision_at(method.reproducibility, level) if method else None


def sample_means(y_spec: np.ndarray, groups: np.ndarray) -> tuple[list, np.ndarray]:
    """Sample ids in first-seen order and the mean value of each sample's spectra
    (replicates averaged; NaN when a replicate has no value)."""
    order = list(dict.fromkeys(groups.tolist()))
    return order, np.array([y_spec[groups == g].mean() for g in order])


def validate_model(session: Session, actor: Actor, label: str, *, calset_name: str | None = None,
                   kind: str = "initial", criteria: AcceptanceCriteria | None = None) -> ValidationRecord:
    """Predict a validation set and record statistics and the verdict.

    Uses the validation members of the model's own set, or every member of
    ``calset_name`` (an independent set). A pass moves a draft to validated;
    on an approved or active model it renews the revalidation date.
    """
    authorize(actor, Action.MODEL_VALIDATE)
    if kind not in VALIDATION_KINDS:
        raise InputError("validation kind must be initial, local or general", field="--kind")
    mv = get_model(session, label)
    # Legal from draft, validated, approved and active (periodic revalidation); not while a
    # reviewer holds it (in_review) nor after it has ended.
    next_state = check_transition(mv.state, LifecycleAction.VALIDATE, label=f"model {mv.label}")
    cs = get_calset(session, calset_name) if calset_name else session.get(CalibrationSet, mv.calibration_set_id)
    if cs.property_id != mv.property_id:
        raise InputError(f"calibration set {cs.name} is for another property", field="--calset")
    role = None if calset_name else "val"
    if not members_of(session, cs, role):
        raise InputError(f"calibration set {cs.name} has no validation members; name "
                         "an independent calibration set to validate on", field="--calset")
    members = members_of(session, cs, role)
    spectrum_ids = [int(sid) for m in members for sid in m.spectrum_ids]
    groups = np.array([m.sample_id for m in members for _ in m.spectrum_ids])
    assessed = assess_spectra(session, mv, spectrum_ids)
    order, y_pred = sample_means(assessed.y, groups)
    ref = {m.sample_id: m.reference_value for m in members}
    y_ref = np.array([ref[g] for g in order])
    # A family may give no value for a sample (a look-up with no neighbour near enough):
    # the statistics cover the samples with a value, and the gap is a reason to fail.
    has_value = np.isfinite(y_pred)
    without = int(np.count_nonzero(~has_value))
    prop = session.get(Property, mv.property_id)
    R = _reproducibility_at(session, prop, float(y_ref.mean()))
    stats = validation_statistics(y_ref[has_value], y_pred[has_value], n_components=None,
                                  reproducibility=R)
    stats_json = stats.to_json()
    stats_json["n_components"] = mv.n_components
    stats_json["family"] = mv.family.value
    stats_json["n_without_value"] = without
    if assessed.inputs:
        stats_json["inputs"] = assessed.inputs
    if criteria is None:
        from .properties import acceptance_for

        criteria = acceptance_for(prop)
    passed, reasons = verdict(_with_components(stats, mv.n_components), criteria)
    if without:
        reasons.append(f"{without} validation sample(s) got no value from {mv.label}")
        passed = False
    rec = ValidationRecord(model_version_id=mv.id, calibration_set_id=cs.id, user_id=actor.id,
                           kind=kind, n=stats.n, bias=stats.bias, sep=stats.sep,
                           rmsep=stats.rmsep, slope=stats.slope, intercept=stats.intercept,
                           r2=stats.r2, bias_t=stats.bias_t, bias_p=stats.bias_p,
                           sep_over_sigma_r=stats.sep_over_sigma_r, passed=passed,
                           criteria={**criteria.to_json(), "rule": criteria.rule_text()},
                           statistics=stats_json, reasons=reasons, sha256="")
    session.add(rec)
    session.flush()
    rec.sha256 = validation_record_hash(rec)
    session.add(rec)
    if passed:
        if next_state != mv.state:
            record_state_change(session, mv, next_state, actor, "passing validation record")
        mv.last_validated_at = rec.created_at
        session.add(mv)
        if mv.state in IN_SERVICE_STATES:
            clear_answered_triggers(session, mv, actor.id, rec.id)
    session.flush()
    audit(session, actor, Action.MODEL_VALIDATE, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "calibration_set": cs.name, "passed": passed, "reasons": reasons,
                "sep": stats.sep, "rmsep": stats.rmsep, "bias": stats.bias,
                "sep_over_sigma_r": stats.sep_over_sigma_r, "n": stats.n, "record_id": rec.id},
          hashes={"validation_record": [(rec.id, rec.sha256)]})
    return rec


def _settings(mv: ModelVersion) -> dict | None:
    """The family's settings and fitted figures (None when the artifact does not verify)."""
    try:
        return load_fitted(mv.artifact, mv.artifact_sha256).summary()
    except (IntegrityError, InputError):
        return None


def _with_components(stats, n_components):
    from dataclasses import replace

    return replace(stats, n_components=n_components)


def list_models(session: Session, actor: Actor, *, property_code: str | None = None,
                state: str | None = None) -> list[dict]:
    authorize(actor, Action.VIEW)
    q = select(ModelVersion).order_by(ModelVersion.id)
    if property_code:
        prop = session.exec(select(Property).where(Property.code == property_code.upper())).first()
        if prop is None:
            raise NotFoundError(f"unknown property {property_code!r}")
        q = q.where(ModelVersion.property_id == prop.id)
    if state:
        q = q.where(ModelVersion.state == as_state(state))
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    return [{"id": m.id, "label": m.label, "property": props[m.property_id],
             "grade": grades.get(m.grade_id), "family": m.family, "state": m.state,
             "components": m.n_components,
             "rmsecv": m.cv.get("rmsecv", [None] * m.n_components)[m.n_components - 1]
             if m.n_components else None,
             "created_at": m.created_at, "last_validated_at": m.last_validated_at}
            for m in session.exec(q).all()]


def model_detail(session: Session, actor: Actor, label: str) -> dict:
    authorize(actor, Action.VIEW)
    from ..storage.models import Deployment, Instrument, Signature, User

    mv = get_model(session, label)
    users = {u.id: u.name for u in session.exec(select(User)).all()}
    cs = session.get(CalibrationSet, mv.calibration_set_id)
    prop = session.get(Property, mv.property_id)
    validations = session.exec(select(ValidationRecord).where(
        ValidationRecord.model_version_id == mv.id).order_by(ValidationRecord.id)).all()
    history = session.exec(select(ModelStateChange).where(
        ModelStateChange.model_version_id == mv.id).order_by(ModelStateChange.id)).all()
    deployments = session.exec(select(Deployment).where(Deployment.model_version_id == mv.id)
                               .order_by(Deployment.id)).all()
    serials = {i.id: i.serial for i in session.exec(select(Instrument)).all()}
    sigs = {s.id: s for s in session.exec(select(Signature).where(
        Signature.entity_type == "model_version", Signature.entity_id == mv.id)).all()}
    return {
        "id": mv.id, "label": mv.label, "property": prop.code, "unit": prop.unit,
        "state": mv.state, "author": users.get(mv.author_id), "created_at": mv.created_at,
        "family": mv.family, "description": DESCRIPTIONS[mv.family],
        "components": mv.n_components, "recipe": mv.recipe, "cv": mv.cv,
        "settings": _settings(mv),
        "artifact_sha256": mv.artifact_sha256, "q_limit": q_limit_of(mv.artifact, mv.artifact_sha256),
        "parent": session.get(ModelVersion, mv.parent_id).label if mv.parent_id else None,
        "calibration_set": {"name": cs.name, "sha256": cs.sha256, "n_cal": cs.n_cal, "n_val": cs.n_val},
        "last_validated_at": mv.last_validated_at,
        "validations": [{"id": v.id, "kind": v.kind, "passed": v.passed, "n": v.n,
                         **precision_summary(v.statistics, v.criteria),
                         "bias_p": v.bias_p, "r2": v.r2,
                         "reasons": v.reasons, "by": users.get(v.user_id), "at": v.created_at}
                        for v in validations],
        "history": [{"from": h.from_state, "to": h.to_state, "by": users.get(h.user_id),
                     "at": h.occurred_at, "reason": h.reason,
                     "signature": ({"meaning": sigs[h.signature_id].meaning,
                                    "signer": users.get(sigs[h.signature_id].user_id)}
                                   if h.signature_id in sigs else None)} for h in history],
        "deployments": [{"instrument": serials[d.instrument_id], "state": d.state,
                         "deployed_at": d.deployed_at, "ended_at": d.ended_at,
                         "by": users.get(d.deployed_by_id)} for d in deployments],
    }
