"""How each model family is trained on a frozen calibration set (the one table the
services consult by family: :data:`TRAINERS`).

Every trainer takes the same :class:`TrainingContext` (the set, its property and
grade, the calibration members' spectra and reference values) and the family's
options (a JSON recipe; unknown keys are refused), and returns a
:class:`TrainingOutcome`: the fitted model behind the common interface
(:class:`registry.chemometrics.fitted.FittedModel`), what the version row stores
(preprocessing recipe, number of fitted parameters, training summary) and what the
audit event says. Everything after training (storing, validating, signing,
deploying, predicting, tracing) is the same code for every family.

Family options (``--recipe FILE.json`` of ``model train --family ...``):

``pls``
    ``recipe`` (preprocessing steps), ``max_components``, ``folds``, ``cv_method``,
    ``selection``, ``n_components``, ``random_state``.
``band``
    ``band`` [ν̃₁, ν̃₂] (cm⁻¹, required), ``anchors``, ``measure`` (area, height),
    ``degree`` (1, 2), ``saturation_limit``, ``anchor_limits``, ``recipe``.
``cls``
    K estimated from the calibration mixtures: ``components`` — property codes of
    the mixture components, the set's own property among them; each calibration
    sample needs a valid reference result for every component (its concentration).
    Or K from pure-component reference spectra: ``pure_spectra`` —
    ``{CODE: {"sample": SAMPLE_ID, "value": concentration}}``, where SAMPLE_ID is a
    sample whose imported spectra are the pure component (their mean, divided by
    ``value``, is the row of K: the spectrum of one concentration unit, Beer–Lambert).
    Also ``non_negative``, ``baseline``, ``confidence``, ``condition_limit``,
    ``recipe``.
``derived``
    ``formula`` over property codes. Each input is the *current* model of that
    property on the set's grade (see :func:`registry.services.models.current_model`);
    its SEP is that version's latest passing validation. The calibration set gives
    the validation samples (reference values of the derived property itself).
``neighbours``
    ``n_neighbors``, ``space`` (spectra, scores), ``n_components``,
    ``explained_variance``, ``weights``, ``distance_limit``, ``recipe`` (default:
    the PLS default preprocessing).

Band, CLS and neighbour models are fitted on each calibration sample's mean
spectrum (replicates averaged): replicate spectra of one sample are not
independent calibration points, and for the neighbour look-up a replicate would
be every sample's own nearest neighbour.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
from sqlmodel import Session, select

from ..chemometrics import train_model
from ..chemometrics.families import (BandCalibration, ClassicalLeastSquares, DerivedProperty,
                                     NeighbourLookup)
from ..chemometrics.families.formula import codes, parse
from ..chemometrics.family_names import ModelFamily
from ..chemometrics.fitted import DerivedModel, FittedModel, PLSModel, SpectralFamilyModel
from ..errors import InputError, NotFoundError
from ..spectra.preprocessing import Recipe
from ..storage.models import CalibrationMember, CalibrationSet, Grade, Property, Sample, Spectrum
from ..storage.spectra_store import load_on_axis


@dataclass
class TrainingContext:
    """What every trainer gets: the set and the calibration members' data (one row per
    spectrum; ``groups`` = sample id)."""

    session: Session
    calset: CalibrationSet
    prop: Property
    grade: Grade | None
    X: np.ndarray
    y: np.ndarray
    groups: np.ndarray
    axis: np.ndarray
    members: list[CalibrationMember]
    metadata: dict[str, Any]

    def sample_means(self) -> tuple[np.ndarray, np.ndarray, list[int]]:
        """(mean spectrum per sample, its reference value, sample ids) in member order."""
        order = list(dict.fromkeys(self.groups.tolist()))
        X = np.array([self.X[self.groups == g].mean(axis=0) for g in order])
        y = np.array([self.y[self.groups == g][0] for g in order])
        return X, y, order


@dataclass
class TrainingOutcome:
    fitted: FittedModel
    n_parameters: int
    recipe: list[dict[str, Any]]
    summary: dict[str, Any]
    audit: dict[str, Any] = field(default_factory=dict)


def _options(options: dict[str, Any] | None, defaults: dict[str, Any], family: str
             ) -> dict[str, Any]:
    given = dict(options or {})
    unknown = sorted(set(given) - set(defaults))
    if unknown:
        raise InputError(f"unknown {family} option(s) {', '.join(unknown)}; known: "
                         f"{', '.join(sorted(defaults))}", field=unknown[0])
    missing = [k for k, v in defaults.items() if v is _REQUIRED and k not in given]
    if missing:
        raise InputError(f"the {family} family needs option {missing[0]!r}", field=missing[0])
    return {**defaults, **given}


_REQUIRED = object()


def _summary(ctx: TrainingContext, n_samples: int, **extra) -> dict[str, Any]:
    """The training summary stored in the version's ``cv`` column for families without a
    cross-validation curve."""
    return {"method": "none", "n_folds": None, "selection_rule": None,
            "n_spectra": int(ctx.X.shape[0]), "n_samples": int(n_samples), **extra}


def _pipeline(ctx: TrainingContext, steps, X: np.ndarray):
    recipe = Recipe.from_json(steps, ctx.axis)
    pipe = recipe.build(ctx.axis)
    return pipe, pipe.fit_transform(X), recipe.to_json()


# --------------------------------------------------------------------------- PLS
PLS_DEFAULTS = {"recipe": None, "max_components": 20, "folds": 10, "cv_method": "venetian",
                "selection": "haaland-thomas", "n_components": None, "random_state": 0}


def train_pls(ctx: TrainingContext, options: dict[str, Any] | None) -> TrainingOutcome:
    from .models import DEFAULT_RECIPE, DIAGNOSTICS_CONFIDENCE

    o = _options(options, PLS_DEFAULTS, "pls")
    recipe = o["recipe"] if o["recipe"] is not None else DEFAULT_RECIPE
    trained = train_model(ctx.X, ctx.y, ctx.axis, recipe, max_components=o["max_components"],
                          folds=o["folds"], groups=ctx.groups, n_components=o["n_components"],
                          selection=o["selection"], method=o["cv_method"],
                          random_state=o["random_state"], confidence=DIAGNOSTICS_CONFIDENCE,
                          metadata=ctx.metadata)
    cv = trained.cv
    summary = {"rmsecv": [float(v) for v in cv.rmsecv], "press": [float(v) for v in cv.press],
               "selected_components": int(cv.selected_components),
               "selection_rule": cv.selection_rule, "method": cv.method,
               "seed": o["random_state"] if cv.method == "random" else None,
               "n_folds": int(cv.n_folds), "f_test_p": [float(v) for v in cv.f_test_p],
               "n_spectra": int(ctx.X.shape[0]),
               "n_samples": int(len(set(ctx.groups.tolist())))}
    return TrainingOutcome(PLSModel(trained), trained.n_components, trained.recipe, summary,
                           {"n_components": trained.n_components,
                            "selection_rule": cv.selection_rule,
                            "rmsecv_at_selected": float(cv.rmsecv[trained.n_components - 1])})


# --------------------------------------------------------------------------- band
BAND_DEFAULTS = {"band": _REQUIRED, "anchors": None, "measure": "area", "degree": 1,
                 "saturation_limit": 1.5, "anchor_limits": None, "recipe": []}


def train_band(ctx: TrainingContext, options: dict[str, Any] | None) -> TrainingOutcome:
    o = _options(options, BAND_DEFAULTS, "band")
    X, y, _ = ctx.sample_means()
    pipe, Xp, steps = _pipeline(ctx, o["recipe"], X)
    est = BandCalibration(band=o["band"], anchors=o["anchors"], measure=o["measure"],
                          degree=o["degree"], saturation_limit=o["saturation_limit"],
                          anchor_limits=o["anchor_limits"]).fit(Xp, y, pipe.axis_out_)
    settings = {k: v for k, v in o.items() if k != "recipe"}
    meta = {**ctx.metadata, "n_parameters": int(est.degree), "options": settings}
    return TrainingOutcome(SpectralFamilyModel(est, ctx.axis, pipe, meta), int(est.degree), steps,
                           _summary(ctx, len(y), options=settings, calibration=est.statistics_),
                           {"options": settings, "sec": est.statistics_.get("sec")})


# --------------------------------------------------------------------------- CLS
CLS_DEFAULTS = {"components": None, "pure_spectra": None, "non_negative": False,
                "baseline": "none", "confidence": 0.95, "condition_limit": 30.0, "recipe": []}


def _code_list(value, field_name: str) -> list[str]:
    if not isinstance(value, (list, tuple)) or not value or not all(
            isinstance(c, str) and c.strip() for c in value):
        raise InputError(f"{field_name} must be a list of property codes", field=field_name)
    out = [c.strip().upper() for c in value]
    if len(set(out)) != len(out):
        raise InputError(f"{field_name} names a property twice", field=field_name)
    return out


def _pure_spectra(ctx: TrainingContext, spec) -> tuple[list[str], np.ndarray, dict]:
    """Component codes, their unit-concentration spectra (rows, raw) and the lineage."""
    if not isinstance(spec, dict) or not spec:
        raise InputError("pure_spectra maps property codes to {\"sample\": ID, \"value\": "
                         "concentration}", field="pure_spectra")
    names, rows, lineage = [], [], {}
    for code, entry in spec.items():
        where = f"pure_spectra.{code}"
        if not isinstance(entry, dict) or set(entry) != {"sample", "value"}:
            raise InputError("give {\"sample\": ID, \"value\": concentration}", field=where)
        value = entry["value"]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 \
                or not np.isfinite(value):
            raise InputError("the pure component's concentration must be a positive number",
                             field=f"{where}.value")
        sample = ctx.session.exec(select(Sample).where(
            Sample.external_id == str(entry["sample"]))).all()
        if len(sample) != 1:
            raise (NotFoundError if not sample else InputError)(
                f"pure-component sample {entry['sample']!r} "
                + ("not found" if not sample else "exists at several sites"))
        ids = list(ctx.session.exec(select(Spectrum.id).where(
            Spectrum.sample_id == sample[0].id).order_by(Spectrum.id)).all())
        if not ids:
            raise InputError(f"sample {entry['sample']!r} has no spectrum", field=where)
        rows.append(load_on_axis(ctx.session, ids, ctx.axis).mean(axis=0) / float(value))
        names.append(code.strip().upper())
        lineage[names[-1]] = {"sample": sample[0].external_id, "spectrum_ids": ids,
                              "value": float(value)}
    return names, np.array(rows), lineage


def train_cls(ctx: TrainingContext, options: dict[str, Any] | None) -> TrainingOutcome:
    from .references import calibration_values

    o = _options(options, CLS_DEFAULTS, "cls")
    if (o["components"] is None) == (o["pure_spectra"] is None):
        raise InputError("give either components (K estimated from the calibration mixtures) "
                         "or pure_spectra (K from pure-component spectra)", field="components")
    X, y, sample_ids = ctx.sample_means()
    pipe, Xp, steps = _pipeline(ctx, o["recipe"], X)
    kwargs = dict(non_negative=o["non_negative"], baseline=o["baseline"],
                  confidence=o["confidence"], condition_limit=o["condition_limit"])
    lineage: dict[str, Any] = {}
    if o["pure_spectra"] is not None:
        names, K_raw, lineage = _pure_spectra(ctx, o["pure_spectra"])
        K = pipe.transform(K_raw)
        est = ClassicalLeastSquares(pure_spectra=K, **kwargs).fit(Xp, axis=pipe.axis_out_)
    else:
        names = _code_list(o["components"], "components")
        C = np.empty((len(y), len(names)))
        for j, code in enumerate(names):
            if code == ctx.prop.code:
                C[:, j] = y
                continue
            other = ctx.session.exec(select(Property).where(Property.code == code)).first()
            if other is None:
                raise NotFoundError(f"unknown property {code!r} in components")
            values = calibration_values(ctx.session, sample_ids, other.id)
            missing = [s for s in sample_ids if s not in values]
            if missing:
                ext = ctx.session.get(Sample, missing[0]).external_id
                raise InputError(f"{len(missing)} calibration sample(s) have no valid {code} "
                                 f"result (first: {ext}); K cannot be estimated",
                                 field="components")
            C[:, j] = [values[s][0] for s in sample_ids]
        est = ClassicalLeastSquares(**kwargs).fit(Xp, C, axis=pipe.axis_out_)
    if ctx.prop.code not in names:
        raise InputError(f"the components must include the set's property {ctx.prop.code}",
                         field="components")
    settings = {k: v for k, v in o.items() if k != "recipe"}
    meta = {**ctx.metadata, "n_parameters": len(names), "outputs": names,
            "output_index": names.index(ctx.prop.code), "options": settings,
            "pure_spectra": lineage or None}
    fitted = SpectralFamilyModel(est, ctx.axis, pipe, meta)
    return TrainingOutcome(fitted, len(names), steps,
                           _summary(ctx, len(y), options=settings, components=names,
                                    condition_number=est.condition_number_,
                                    q_limit=est.q_limit_),
                           {"options": settings, "components": names,
                            "k_source": "pure_spectra" if lineage else "estimated"})


# --------------------------------------------------------------------------- neighbours
NEIGHBOUR_DEFAULTS = {"n_neighbors": 1, "space": "spectra", "n_components": None,
                      "explained_variance": 0.99, "weights": "distance", "distance_limit": None,
                      "recipe": None}


def train_neighbours(ctx: TrainingContext, options: dict[str, Any] | None) -> TrainingOutcome:
    from .models import DEFAULT_RECIPE

    o = _options(options, NEIGHBOUR_DEFAULTS, "neighbours")
    X, y, sample_ids = ctx.sample_means()
    pipe, Xp, steps = _pipeline(ctx, DEFAULT_RECIPE if o["recipe"] is None else o["recipe"], X)
    est = NeighbourLookup(n_neighbors=o["n_neighbors"], space=o["space"],
                          n_components=o["n_components"],
                          explained_variance=o["explained_variance"], weights=o["weights"],
                          distance_limit=o["distance_limit"]).fit(Xp, y)
    settings = {k: v for k, v in o.items() if k != "recipe"}
    meta = {**ctx.metadata, "options": settings, "calibration_sample_ids": sample_ids}
    return TrainingOutcome(SpectralFamilyModel(est, ctx.axis, pipe, meta), 0, steps,
                           _summary(ctx, len(y), options=settings,
                                    distance_limit=est.distance_limit_),
                           {"options": settings, "distance_limit": est.distance_limit_})


# --------------------------------------------------------------------------- derived
DERIVED_DEFAULTS = {"formula": _REQUIRED}


def train_derived(ctx: TrainingContext, options: dict[str, Any] | None) -> TrainingOutcome:
    from .lifecycle import latest_passing_record
    from .models import current_model

    o = _options(options, DERIVED_DEFAULTS, "derived")
    if not isinstance(o["formula"], str):
        raise InputError("formula must be a text such as \"(RON + MON) / 2\"", field="formula")
    inputs = codes(parse(o["formula"]))
    if ctx.prop.code in inputs:
        raise InputError(f"the formula of {ctx.prop.code} cannot use {ctx.prop.code} itself",
                         field="formula")
    seps, input_models = {}, {}
    for code in inputs:
        prop = ctx.session.exec(select(Property).where(Property.code == code)).first()
        if prop is None:
            raise NotFoundError(f"the formula uses unknown property {code!r}")
        mv = current_model(ctx.session, prop, ctx.grade)
        if mv is None:
            raise InputError(f"input {code} has no validated, approved or active model"
                             + (f" for grade {ctx.grade.code}" if ctx.grade else ""),
                             field="formula")
        rec = latest_passing_record(ctx.session, mv)
        seps[code] = rec.sep if rec is not None else None
        input_models[code] = {"label": mv.label, "model_version_id": mv.id,
                              "artifact_sha256": mv.artifact_sha256,
                              "validation_record_sha256": rec.sha256 if rec else None,
                              "sep": seps[code]}
    est = DerivedProperty(o["formula"]).fit(seps)
    meta = {**ctx.metadata, "input_models": input_models}
    return TrainingOutcome(DerivedModel(est, ctx.axis, meta), 0, [],
                           _summary(ctx, len(set(ctx.groups.tolist())), formula=o["formula"],
                                    inputs=input_models),
                           {"formula": o["formula"], "inputs": input_models})


Trainer = Callable[[TrainingContext, dict[str, Any] | None], TrainingOutcome]

#: The one place a family name chooses code.
TRAINERS: dict[ModelFamily, Trainer] = {
    ModelFamily.PLS: train_pls,
    ModelFamily.BAND: train_band,
    ModelFamily.CLS: train_cls,
    ModelFamily.DERIVED: train_derived,
    ModelFamily.NEIGHBOURS: train_neighbours,
}
