"""Selection runs: which untested samples to send for reference testing, within a budget.

A lab manager asks for ``n`` samples, or as many as a budget buys, to be rated by the
primary test methods of one or more properties. :func:`run_selection` is that user
action; it is made of named steps, each usable (and tested) on its own:

1. :func:`check_request` — every parameter checked, nothing read (a
   :class:`SelectionRequest`); the CLI calls it before it opens a transaction;
2. :func:`resolve_request` — the rows, prices and current models the request
   names (a :class:`SelectionSetting`);
3. :func:`build_pool` — the *pool*: samples of the grade with no valid (or
   suspect) reference result for any requested property, not waiting in an open
   selection run for one of them, and (optionally) measured in a date range or at
   one site; with ``pool="outside-coverage"`` only those a current model flags as
   outside its space (leverage, Hotelling T², Q residual or nearest-neighbour
   check, ASTM E1655 practice, from memory). Also the *calibration reference*: the
   calibration members of the current model's frozen set or, without a model,
   every sample of the grade with a valid value for one of the properties. One row
   per sample: the mean of its replicate spectra (a :class:`CandidatePool`);
4. :func:`build_space` — both projected into one PCA space
   (:class:`registry.selection.SelectionSpace`) after the current model's fitted
   recipe, or a given one (a :class:`ScoreSpace`);
5. :func:`choose_picks` — the pool ranked by Kennard–Stone in augment mode,
   D-optimal with the calibration rows fixed, or Duplex, cut to ``n`` or to the
   budget (:func:`registry.selection.picking.rank_pool`);
6. :func:`explain_picks` and :func:`coverage_benefit` — every pick in words and
   numbers; the share of recent production inside the calibration space now (as the
   coverage map counts it) and an estimate with the picks at today's fixed limits,
   largest gap now and after;
7. :func:`store_run` — the run, its picks and the audit event.

The current model of a property and grade is
:func:`registry.services.models.current_model`; without one the space is plain PCA
on the default recipe. Several properties: the space is that of the current model of
``space_property`` when given, else of the property whose test costs most among those
with a current model (the costliest test is the one worth steering); every current
model's flags are reported and, with ``outside-coverage``, a sample flagged by any of
them is kept.

Without a method the run takes the one :func:`recommend_for` proposes for the
situation it sees (:func:`registry.selection.recommend.recommend_method`: share of the
pool outside the space model, size of the calibration reference, whether its
reference values are known); the result says which, and why, in one line.

Every run is stored with its parameters and a content hash of the pool and its
picks, and is deterministic: candidates are ordered by sample id and the
D-optimal random starts are seeded from the pool hash.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, Callable

import numpy as np
from scipy.spatial import cKDTree
from sqlmodel import Session, select

from ..chemometrics import TrainedModel
from ..chemometrics.diagnostics import CHECK_WORDS
from ..errors import InputError
from ..lifecycle.permissions import Action
from ..lineage.canonical import content_hash
from ..plain_json import plain_json
from ..selection import SelectionSpace, budget_positions, pick_rationale
from ..selection.picking import (DUPLEX_MIN_PICKS, METHODS, NEEDS_VALUES, Picks, brought_inside,
                                 nearest_before, rank_pool, t2_ellipse)
from ..selection.recommend import Recommendation, recommend_method
from ..spectra.axes import on_axis
from ..spectra.preprocessing import Recipe
from ..storage.bulk import in_blocks
from ..storage.models import (CalibrationMember, Grade, ModelVersion, Property, ReferenceMethod,
                              ReferenceResult, Sample, SelectionPick, SelectionRun, Site,
                              SpectralAxis, Spectrum)
from ..storage.spectra_store import axis_values, load_on_axis
from ..storage.types import as_utc
from .admin import get_grade, get_property, get_site
from .context import Actor, audit, authorize
from .models import DEFAULT_RECIPE, current_model, load_trained
from .predictions import SPACE_FLAGS
from .references import calibration_values
from .views import recent_production

__all__ = ["METHODS", "METRICS", "POOLS", "SEND_LIST_COLUMNS", "CandidatePool", "ScoreSpace",
           "SelectionRequest", "SelectionResult", "SelectionSetting", "build_pool", "build_space",
           "check_request", "choose_picks", "coverage_benefit", "explain_picks", "pick_count",
           "mean_spectra", "outside_share", "preprocessed", "recommend_for", "resolve_request",
           "run_request", "run_selection", "sample_price", "samples_by_id", "selection_parameters",
           "store_run"]

POOLS = ("unreferenced", "outside-coverage")
METRICS = ("mahalanobis", "euclidean")
# Recent production for the benefit figures: spectra of the last 90 days before the newest
# candidate spectrum (anchored on the data, not the clock, so a re-run gives the same figures).
RECENT_WINDOW_DAYS = 90
# Spectra loaded per step (one progress tick each).
_LOAD_BLOCK = 2000
_HAS_RESULT = ("valid", "suspect")  # suspect results await review: the sample is not untested
# The calibration's limit drawn on the score map: the level of the prediction-time checks.
MAP_LIMIT_CONFIDENCE = 0.99

_DIAGNOSTIC_KEYS = ("leverage", "leverage_limit", "t2", "t2_limit", "q", "q_limit",
                    "nn_distance", "nn_limit", "y_pred")

Progress = Callable[[str, int, int], None]
# The library's strategy names (registry.selection.strategies) a recommendation can give,
# as this service's methods.
_SERVICE_METHOD = {"ks-augment": "kennard-stone", "spxy": "spxy"}

SEND_LIST_COLUMNS = ("rank", "sample_id", "batch", "source", "use", "tests", "cost",
                     "cumulative_cost", "currency", "reason", "distance", "nearest_sample", "leverage",
                     "log_det_gain", "flags")


# --------------------------------------------------------------------------- 1. the request
@dataclass(frozen=True)
class SelectionRequest:
    """A checked selection request (see :func:`run_selection` for the parameters).

    ``property_codes`` are upper case, ``since``/``until`` UTC and ``recipe`` the
    normalised recipe (defaults filled in) or None.
    """

    property_codes: tuple[str, ...]
    grade: str
    method: str | None
    n: int | None = None
    budget: float | None = None
    pool: str = "unreferenced"
    since: datetime | None = None
    until: datetime | None = None
    site: str | None = None
    recipe: list[dict] | None = None
    explained_variance: float = 0.99
    n_components: int | str | None = None
    metric: str = "mahalanobis"
    space_property: str | None = None


def check_request(*, property_codes: list[str], grade: str, method: str | None = None,
                  n: int | None = None,
                  budget: float | None = None, pool: str = "unreferenced",
                  since: datetime | None = None, until: datetime | None = None,
                  site: str | None = None, recipe: list[dict] | None = None,
                  explained_variance: float = 0.99, n_components: int | str | None = None,
                  metric: str = "mahalanobis",
                  space_property: str | None = None) -> SelectionRequest:
    """Check every parameter that needs no database; InputError names the option.

    ``method`` None means the recommended one (:func:`recommend_for`)."""
    codes = [c.strip().upper() for c in (property_codes or []) if c and c.strip()]
    if not codes:
        raise InputError("name at least one property to test", field="--property")
    if len(set(codes)) != len(codes):
        raise InputError("a property is named twice", field="--property")
    if method is not None and method not in METHODS:
        raise InputError(f"unknown method {method!r}; use one of {', '.join(METHODS)}",
                         field="--method")
    if (n is None) == (budget is None):
        raise InputError("give either a number of samples or a budget, not both",
                         field="--n/--budget")
    if n is not None and (isinstance(n, bool) or int(n) != n or n < 1):
        raise InputError(f"the number of samples must be a positive whole number, got {n!r}", field="--n")
    if budget is not None and not (math.isfinite(budget) and budget > 0):
        raise InputError(f"the budget must be a positive amount, got {budget!r}", field="--budget")
    if method == "duplex" and n is not None and n < DUPLEX_MIN_PICKS:
        raise InputError(f"duplex needs at least {DUPLEX_MIN_PICKS} picks (two for calibration, "
                         "two for validation)", field="--n")
    if pool not in POOLS:
        raise InputError(f"unknown pool {pool!r}; use {' or '.join(POOLS)}", field="--pool")
    if metric not in METRICS:
        raise InputError(f"unknown metric {metric!r}; use {' or '.join(METRICS)}", field="--metric")
    if not (0 < explained_variance <= 1):
        raise InputError(f"explained variance must be in (0, 1], got {explained_variance!r}",
                         field="--explained-variance")
    if n_components is not None and n_components != "model" and (
            isinstance(n_components, bool) or not isinstance(n_components, int) or n_components < 1):
        raise InputError(f"components must be a positive whole number or 'model', got "
                         f"{n_components!r}", field="--components")
    since, until = as_utc(since), as_utc(until)
    if since is not None and until is not None and since >= until:
        raise InputError("the start date must be before the end date", field="--since")
    if space_property is not None:
        space_property = space_property.strip().upper()
        if space_property not in codes:
            raise InputError(f"the model space must be one of the properties tested "
                             f"({', '.join(codes)}), got {space_property!r}",
                             field="--space-property")
    return SelectionRequest(
        property_codes=tuple(codes), grade=grade, method=method,
        n=int(n) if n is not None else None, budget=float(budget) if budget is not None else None,
        pool=pool, since=since, until=until, site=site,
        recipe=Recipe.from_json(recipe).to_json() if recipe is not None else None,
        explained_variance=explained_variance, n_components=n_components, metric=metric,
        space_property=space_property)


# --------------------------------------------------------------------------- 2. the setting
@dataclass
class MethodCharge:
    """One reference method a picked sample is sent for, and what it costs."""

    code: str
    cost: float
    currency: str
    properties: list[str]


@dataclass
class SelectionSetting:
    """What a request names in the registry: rows, prices and current models."""

    request: SelectionRequest
    properties: list[Property]
    grade: Grade
    site: Site | None
    charges: list[MethodCharge]
    models: dict[str, ModelVersion | None]
    trained: dict[str, TrainedModel]
    space_model: ModelVersion | None

    @property
    def cost_per_sample(self) -> float:
        return float(sum(c.cost for c in self.charges))

    @property
    def currency(self) -> str:
        return self.charges[0].currency

    @property
    def tests_text(self) -> str:
        return " + ".join(f"{c.code} ({'/'.join(c.properties)})" for c in self.charges)

    @property
    def space_code(self) -> str | None:
        """The property whose current model gives the space (None without one)."""
        if self.space_model is None:
            return None
        return next(c for c in self.request.property_codes if self.models[c] is self.space_model)

    @property
    def space_trained(self) -> TrainedModel | None:
        """The trained form of :attr:`space_model` (its recipe and axis shape the space)."""
        return None if self.space_model is None else self.trained[self.space_code]


def _method_charges(session: Session, props: list[Property]) -> list[MethodCharge]:
    """One charge per distinct method code: T10/T50/T90 share one ASTM D86 run (charged once)."""
    charges: dict[str, MethodCharge] = {}
    for prop in props:
        methods = session.exec(select(ReferenceMethod).where(
            ReferenceMethod.property_id == prop.id, ReferenceMethod.active == True)  # noqa: E712
            .order_by(ReferenceMethod.cost, ReferenceMethod.id)).all()
        if not methods:
            raise InputError(f"property {prop.code} has no active reference method, so a "
                             "sample cannot be sent for it", field="--property")
        m = methods[0]  # the cheapest active method (ties: the oldest)
        key = m.code.upper()
        if key in charges:
            charges[key].cost = max(charges[key].cost, float(m.cost))
            charges[key].properties.append(prop.code)
        else:
            charges[key] = MethodCharge(m.code, float(m.cost), m.currency, [prop.code])
    currencies = {c.currency for c in charges.values()}
    if len(currencies) > 1:
        raise InputError(f"the methods are priced in several currencies ({', '.join(sorted(currencies))}); "
                         "set one currency for all of them", field="--property")
    return list(charges.values())


def _space_model(request: SelectionRequest, models: dict[str, ModelVersion | None],
                 charges: list[MethodCharge]) -> ModelVersion | None:
    """The model whose space the picks are made in: ``space_property``'s, else that of the
    costliest test among the properties with a current model (ties: request order)."""
    if request.space_property is not None:
        mv = models[request.space_property]
        if mv is None:
            raise InputError(f"{request.space_property} has no current model on grade "
                             f"{request.grade}, so its model space cannot be used",
                             field="--space-property")
        return mv
    cost = {p: c.cost for c in charges for p in c.properties}
    with_model = [c for c in request.property_codes if models[c] is not None]
    if not with_model:
        return None
    return models[max(with_model, key=lambda c: (cost[c], -request.property_codes.index(c)))]


def sample_price(session: Session, actor: Actor, property_codes: list[str]) -> dict[str, Any]:
    """What one picked sample costs when tested for ``property_codes`` (the send list's
    charges: the cheapest active method per property, a shared method charged once)."""
    authorize(actor, Action.VIEW)
    codes = [c.strip().upper() for c in property_codes if c and c.strip()]
    if not codes:
        return {"tests": [], "per_sample": 0.0, "currency": None}
    charges = _method_charges(session, [get_property(session, c) for c in codes])
    return {"tests": [{"method": c.code, "cost": c.cost, "properties": c.properties}
                      for c in charges],
            "per_sample": float(sum(c.cost for c in charges)), "currency": charges[0].currency}


def resolve_request(session: Session, request: SelectionRequest) -> SelectionSetting:
    """Look up the properties, grade, site, method prices and current models of ``request``."""
    props = [get_property(session, c) for c in request.property_codes]
    grade = get_grade(session, request.grade)
    site = get_site(session, request.site) if request.site else None
    charges = _method_charges(session, props)
    models = {p.code: current_model(session, p, grade) for p in props}
    space_model = _space_model(request, models, charges)
    setting = SelectionSetting(request=request, properties=props, grade=grade, site=site,
                               charges=charges, models=models, trained={},
                               space_model=space_model)
    budget, cost = request.budget, setting.cost_per_sample
    if budget is not None and cost > budget * (1 + 1e-9):
        raise InputError(f"the budget {budget:g} {setting.currency} does not cover one sample: "
                         f"{setting.tests_text} cost {cost:g} {setting.currency} per sample",
                         field="--budget")
    if request.n_components == "model" and space_model is None:
        raise InputError("components taken from the model need a current model for the property and grade",
                         field="--components")
    setting.trained = {c: load_trained(mv) for c, mv in models.items() if mv is not None}
    return setting


# --------------------------------------------------------------------------- 3. the pool
@dataclass(frozen=True)
class SpectrumRef:
    """A stored spectrum as the pool sees it (no data)."""

    id: int
    axis_id: int
    sha256: str
    source_file: str = ""
    acquired_at: datetime | None = None


@dataclass
class CandidatePool:
    """Untested candidates and the calibration reference, one mean spectrum per sample.

    ``universe`` are every untested candidate (ascending sample id) and ``rows`` the
    positions in it that form the pool (all of them, or those outside a current
    model's space). ``X_universe``/``X_reference`` are on ``axis``;
    ``diagnostics[code][i]`` is the current ``code`` model's record for ``universe[i]``.
    ``y_reference`` are the space model's frozen reference values of the calibration
    reference (None without a model).
    """

    universe: list[int]
    spectra: dict[int, list[SpectrumRef]]
    rows: np.ndarray
    reference_ids: list[int]
    reference_spectra: dict[int, list[SpectrumRef]]
    reference_text: str
    axis: np.ndarray
    X_universe: np.ndarray
    X_reference: np.ndarray
    diagnostics: dict[str, list[dict]]
    samples: dict[int, Sample]
    sha256: str
    reference_sha256: str
    y_reference: np.ndarray | None = None

    @property
    def ids(self) -> list[int]:
        """Sample ids of the pool, in pool-row order."""
        return [self.universe[i] for i in self.rows]

    @property
    def size(self) -> int:
        return int(self.rows.size)


def _grade_spectra(session: Session, grade: Grade, site: Site | None, since, until
                   ) -> dict[int, list[SpectrumRef]]:
    q = (select(Spectrum.id, Spectrum.sample_id, Spectrum.axis_id, Spectrum.sha256,
                Spectrum.source_file, Spectrum.acquired_at)
         .join(Sample, Sample.id == Spectrum.sample_id).where(Sample.grade_id == grade.id))
    if site is not None:
        q = q.where(Sample.site_id == site.id)
    out: dict[int, list[SpectrumRef]] = {}
    for sid, sample_id, axis_id, digest, file, acquired in session.exec(q.order_by(Spectrum.id)).all():
        out.setdefault(sample_id, []).append(SpectrumRef(sid, axis_id, digest, file, as_utc(acquired)))
    if since is not None or until is not None:
        # a sample is in the range when one of its spectra was acquired in it
        out = {s: refs for s, refs in out.items()
               if any((since is None or r.acquired_at >= since) and
                      (until is None or r.acquired_at < until) for r in refs)}
    return out


def _tested_samples(session: Session, props: list[Property]) -> set[int]:
    method_ids = [m.id for m in session.exec(select(ReferenceMethod).where(
        ReferenceMethod.property_id.in_([p.id for p in props]))).all()]
    if not method_ids:
        return set()
    return set(session.exec(select(ReferenceResult.sample_id).where(
        ReferenceResult.method_id.in_(method_ids),
        ReferenceResult.status.in_(_HAS_RESULT)).distinct()).all())


def _waiting_samples(session: Session, codes: tuple[str, ...], ignore_run_id: int | None) -> set[int]:
    """Samples already sent for one of ``codes`` in an open selection run."""
    out: set[int] = set()
    for sample_id, run_codes, run_id in session.exec(
            select(SelectionPick.sample_id, SelectionRun.property_codes, SelectionRun.id)
            .join(SelectionRun, SelectionRun.id == SelectionPick.run_id)
            .where(SelectionRun.state == "open")).all():
        if run_id != ignore_run_id and set(run_codes or []) & set(codes):
            out.add(sample_id)
    return out


def _reference(session: Session, setting: SelectionSetting
               ) -> tuple[list[int], dict[int, list[SpectrumRef]], str, dict[int, float] | None]:
    """Calibration reference: (sample ids, their spectra, description, the space model's
    frozen reference value per sample or None without a model)."""
    model, props = setting.space_model, setting.properties
    if model is not None:
        members = session.exec(select(CalibrationMember).where(
            CalibrationMember.set_id == model.calibration_set_id,
            CalibrationMember.role == "cal").order_by(CalibrationMember.sample_id)).all()
        ids = [m.sample_id for m in members]
        frozen: dict[int, set[int]] | None = {m.sample_id: set(m.spectrum_ids) for m in members}
        values: dict[int, float] | None = {m.sample_id: m.reference_value for m in members}
        text = f"calibration members of model {model.label}"
    else:
        grade_samples = session.exec(select(Sample.id).where(Sample.grade_id == setting.grade.id)).all()
        referenced: set[int] = set()
        for prop in props:
            referenced |= set(calibration_values(session, grade_samples, prop.id))
        ids, frozen, values = sorted(referenced), None, None
        text = (f"samples of grade {setting.grade.code} with a valid "
                f"{'/'.join(p.code for p in props)} value")
    spectra: dict[int, list[SpectrumRef]] = {}
    for part in in_blocks(ids):
        for sid, sample_id, axis_id, digest in session.exec(
                select(Spectrum.id, Spectrum.sample_id, Spectrum.axis_id, Spectrum.sha256)
                .where(Spectrum.sample_id.in_(part)).order_by(Spectrum.id)).all():
            if frozen is None or sid in frozen.get(sample_id, ()):
                spectra.setdefault(sample_id, []).append(SpectrumRef(sid, axis_id, digest))
    for refs in spectra.values():
        refs.sort(key=lambda r: r.id)
    return [s for s in ids if s in spectra], spectra, text, values


def _space_axis(session: Session, setting: SelectionSetting, refs: list[SpectrumRef]) -> np.ndarray:
    """The current model's axis, else the most common axis of the spectra (then lowest id)."""
    trained = setting.space_trained
    if trained is not None:
        return trained.axis
    counts: dict[int, int] = {}
    for r in refs:
        counts[r.axis_id] = counts.get(r.axis_id, 0) + 1
    axis_id = min(counts, key=lambda a: (-counts[a], a))
    return axis_values(session.get(SpectralAxis, axis_id))


def mean_spectra(session: Session, spectra: list[list[int]], axis: np.ndarray,
                 progress: Progress | None = None, label: str = "loading spectra") -> np.ndarray:
    """One row per sample (a list of its spectrum ids): the mean of its spectra, on ``axis``."""
    if not spectra:
        return np.empty((0, axis.size))
    flat = [sid for ids in spectra for sid in ids]
    owner = np.repeat(np.arange(len(spectra)), [len(refs) for refs in spectra])
    sums = np.zeros((len(spectra), axis.size))
    for start in range(0, len(flat), _LOAD_BLOCK):
        part = flat[start:start + _LOAD_BLOCK]
        np.add.at(sums, owner[start:start + _LOAD_BLOCK], load_on_axis(session, part, axis))
        if progress is not None:
            progress(label, start + len(part), len(flat))
    return sums / np.array([len(refs) for refs in spectra], dtype=np.float64)[:, None]


def model_view(trained: dict[str, TrainedModel], X: np.ndarray, axis: np.ndarray
               ) -> dict[str, list[dict]]:
    """Each current model's prediction-time record of every row of ``X`` (on ``axis``)."""
    return {code: tm.predict(on_axis(X, axis, tm.axis))[1].records()
            for code, tm in trained.items()}


def build_pool(session: Session, setting: SelectionSetting, *, ignore_run_id: int | None = None,
               progress: Progress | None = None) -> CandidatePool:
    """The candidate pool and the calibration reference of ``setting``.

    ``ignore_run_id``: that run's picks count as not sent (to replay a stored run).
    """
    req, grade, site = setting.request, setting.grade, setting.site
    codes = req.property_codes
    spectra = _grade_spectra(session, grade, site, req.since, req.until)
    excluded = (_tested_samples(session, setting.properties)
                | _waiting_samples(session, codes, ignore_run_id))
    universe = sorted(s for s in spectra if s not in excluded)
    if not universe:
        raise InputError(f"no candidate samples: every {grade.code} sample with a spectrum"
                         f"{' in the date range' if req.since or req.until else ''}"
                         f"{' at ' + site.name if site else ''} already has a "
                         f"{'/'.join(codes)} result or is waiting in an open selection run",
                         field="--pool")
    ref_ids, ref_spectra, ref_text, ref_values = _reference(session, setting)
    axis = _space_axis(session, setting, [r for refs in (*spectra.values(), *ref_spectra.values())
                                          for r in refs])
    X_uni = mean_spectra(session, [[r.id for r in spectra[s]] for s in universe], axis, progress,
                          "loading candidate spectra")
    X_ref = mean_spectra(session, [[r.id for r in ref_spectra[s]] for s in ref_ids], axis, progress,
                          "loading calibration spectra")
    diagnostics = model_view(setting.trained, X_uni, axis)
    if req.pool == "outside-coverage":
        if not setting.trained:
            raise InputError(f"the outside-coverage pool needs a current model for "
                             f"{'/'.join(codes)} on grade {grade.code}; there is none",
                             field="--pool")
        rows = np.flatnonzero([any(f in SPACE_FLAGS for recs in diagnostics.values()
                                   for f in recs[i]["flags"]) for i in range(len(universe))])
        if rows.size == 0:
            raise InputError(f"no candidate sample lies outside the current model's space "
                             f"({len(universe)} untested samples checked)", field="--pool")
    else:
        rows = np.arange(len(universe))
    pool_ids = [universe[i] for i in rows]
    return CandidatePool(
        universe=universe, spectra={s: spectra[s] for s in universe}, rows=rows.astype(np.int64),
        reference_ids=ref_ids, reference_spectra=ref_spectra, reference_text=ref_text, axis=axis,
        X_universe=X_uni, X_reference=X_ref, diagnostics=diagnostics,
        samples={s.id: s for s in samples_by_id(session, pool_ids + ref_ids)},
        sha256=content_hash([[s, [r.sha256 for r in spectra[s]]] for s in pool_ids]),
        reference_sha256=content_hash([[s, [r.sha256 for r in ref_spectra[s]]] for s in ref_ids]),
        y_reference=(np.array([ref_values[s] for s in ref_ids], dtype=np.float64)
                     if ref_values is not None else None))


def samples_by_id(session: Session, ids: list[int]) -> list[Sample]:
    """The samples with these ids (any order), in blocks below the bound-parameter limit."""
    out: list[Sample] = []
    for part in in_blocks(ids):
        out += session.exec(select(Sample).where(Sample.id.in_(part))).all()
    return out


# --------------------------------------------------------------------------- 4. the space
@dataclass
class ScoreSpace:
    """The PCA space of a run, fitted on calibration reference + every untested candidate.

    ``eigenvalues`` are the Mahalanobis weights (None under the Euclidean metric).
    """

    recipe: list[dict]
    space: SelectionSpace
    T_reference: np.ndarray
    T_universe: np.ndarray
    T_pool: np.ndarray
    eigenvalues: np.ndarray | None


def preprocessed(setting: SelectionSetting, pool: CandidatePool) -> tuple[list[dict], np.ndarray]:
    """(recipe, calibration reference + untested candidates preprocessed by it): the current
    model's own fitted recipe, or the requested/default one fitted on these rows."""
    req, trained = setting.request, setting.space_trained
    X_all = np.vstack([pool.X_reference, pool.X_universe])
    if req.recipe is None and trained is not None:
        return trained.recipe, trained.preprocessor.transform(X_all)
    recipe = req.recipe if req.recipe is not None else DEFAULT_RECIPE
    return recipe, Recipe.from_json(recipe).build(pool.axis).fit_transform(X_all)


def build_space(setting: SelectionSetting, pool: CandidatePool) -> ScoreSpace:
    """Preprocess (:func:`preprocessed`) and fit the PCA space; no database access."""
    req = setting.request
    recipe, X_pre = preprocessed(setting, pool)
    n_components = (setting.space_model.n_components if req.n_components == "model"
                    else req.n_components)
    space = SelectionSpace(explained_variance=req.explained_variance,
                           n_components=n_components).fit(X_pre)
    T = space.transform(X_pre)
    n_ref = pool.X_reference.shape[0]
    T_uni = T[n_ref:]
    return ScoreSpace(recipe=recipe, space=space, T_reference=T[:n_ref], T_universe=T_uni,
                      T_pool=T_uni[pool.rows],
                      eigenvalues=space.eigenvalues_ if req.metric == "mahalanobis" else None)


# --------------------------------------------------------------------------- 5. the picks
def pick_count(setting: SelectionSetting, pool_size: int, *, method: str | None = None) -> int:
    """How many picks the request asks for: ``n``, or as many as the budget buys."""
    req = setting.request
    method = method or req.method
    if req.n is not None:
        if req.n > pool_size:
            raise InputError(f"{req.n} samples asked for but the pool has only {pool_size} candidate samples",
                             field="--n")
        k = req.n
    else:
        k = int(budget_positions(np.full(pool_size, setting.cost_per_sample), req.budget).size)
    if method == "duplex" and k < DUPLEX_MIN_PICKS:
        raise InputError(f"duplex needs at least {DUPLEX_MIN_PICKS} picks; "
                         f"{'the number asked for' if req.n is not None else 'the budget'} gives {k}",
                         field="--n" if req.n is not None else "--budget")
    return k


def choose_picks(setting: SelectionSetting, pool: CandidatePool, space: ScoreSpace, *,
                 method: str | None = None, k: int | None = None,
                 progress: Progress | None = None) -> Picks:
    """Rank the pool with the request's method (or ``method``), ``k`` picks (default
    :func:`pick_count`). D-optimal random starts are seeded from the pool hash."""
    method = method or setting.request.method
    k = pick_count(setting, pool.size, method=method) if k is None else k
    tick = (lambda done: progress("selecting", done, k)) if progress else None
    values = {}
    if method in NEEDS_VALUES:
        if setting.space_model is None or pool.y_reference is None:
            raise InputError(f"{method} needs a current model of "
                             f"{'/'.join(setting.request.property_codes)} on grade "
                             f"{setting.grade.code} (its reference values and predictions)",
                             field="--method")
        predicted = pool.diagnostics[setting.space_code]
        values = {"y_cal": pool.y_reference,
                  "y_pool": np.array([predicted[i]["y_pred"] for i in pool.rows], dtype=np.float64)}
    return rank_pool(space.T_reference, space.T_pool, k, method, eigenvalues=space.eigenvalues,
                     random_state=int(pool.sha256[:8], 16), progress=tick, **values)


def outside_share(setting: SelectionSetting, pool: CandidatePool) -> float:
    """Share of the untested candidates that fail a space check of the space model (0 without)."""
    if setting.space_model is None or not pool.universe:
        return 0.0
    records = pool.diagnostics[setting.space_code]
    return float(np.mean([any(f in SPACE_FLAGS for f in rec["flags"]) for rec in records]))


def recommend_for(setting: SelectionSetting, pool: CandidatePool) -> Recommendation:
    """The method the measured evidence supports for this run's situation, as a method of
    :data:`METHODS` (the library's ``ks-augment`` is this service's ``kennard-stone``:
    Kennard–Stone augmenting the calibration reference in the PCA space of reference +
    candidates)."""
    rec = recommend_method(outside_share(setting, pool), len(pool.reference_ids),
                           references_known=pool.y_reference is not None)
    return Recommendation(_SERVICE_METHOD[rec.method], rec.reason, rec.scenario, rec.evidence)


# --------------------------------------------------------------------------- 6. explaining
def _flag_words(prop_code: str, record: dict) -> str:
    parts = []
    for flag in record["flags"]:
        words, value, limit = CHECK_WORDS.get(flag, (None, None, None))
        if limit is not None:  # the space checks; the prediction range is reported apart
            parts.append(f"{words} {record[value]:.3g} > limit {record[limit]:.3g}")
    return f"outside the {prop_code} model's space ({'; '.join(parts)})" if parts else ""


def _reason(method: str, use: str, rank: int, dist: float, nearest: str, gain: float,
            metric: str, flags_text: str, has_reference: bool) -> str:
    what = "Mahalanobis distance" if metric == "mahalanobis" else "distance"
    near = f"{what} {dist:.3g} to the nearest {nearest}" if nearest else ""
    if method == "spxy":
        text = (f"largest remaining joint gap in spectra and predicted value: {near}"
                if near else "one of the two most different samples in spectra and value")
    elif method == "kennard-stone":
        # without a calibration the first two picks are the most distant pair of the pool
        text = (f"largest remaining gap in the calibration space: {near}"
                if has_reference or rank > 2 else
                "one of the two most different samples of the pool" + (f" ({near})" if near else ""))
    elif method == "d-optimal":
        text = (f"raises ln det(Z'Z) by {gain:.3g}" if math.isfinite(gain)
                else "needed with the other picks to make the design estimable")
        text += f"; {near}" if near else ""
    else:
        text = (f"for {use}: Duplex maximin pick, {near}" if near else
                f"for {use}: one of the two most different samples left for the {use} set")
    return f"{text}; {flags_text}" if flags_text else text


def _nearest_words(picks: Picks, r: int, cal_row: int, rank: int, pool: CandidatePool) -> str:
    label = lambda sample_id: pool.samples[sample_id].external_id  # noqa: E731
    pool_ids = pool.ids
    if cal_row >= 0:
        return f"calibration sample {label(pool.reference_ids[cal_row])}"
    if rank < 0:
        return ""
    earlier = label(pool_ids[picks.rows[rank]])
    if picks.method == "duplex":
        return f"earlier {picks.use[r]} pick {earlier}"
    return f"earlier pick {earlier} (rank {rank + 1})"


def explain_picks(setting: SelectionSetting, pool: CandidatePool, space: ScoreSpace,
                  picks: Picks) -> list[dict[str, Any]]:
    """The send list: one row per pick in rank order (:data:`SEND_LIST_COLUMNS`, plus
    ``sample_pk`` and each current model's ``diagnostics``), with a reason in words.

    One leverage per row: the space model's own prediction-time leverage (the figure its
    leverage check and the reason's flag text use), else, without a model, the leverage
    in the selection space."""
    req = setting.request
    rationale = pick_rationale(space.T_reference, space.T_pool, picks.rows,
                               eigenvalues=space.eigenvalues)
    nearest = nearest_before(space.T_reference, space.T_pool, picks, eigenvalues=space.eigenvalues)
    cost, pool_ids, has_reference = setting.cost_per_sample, pool.ids, bool(pool.reference_ids)
    rows, spent = [], 0.0
    for r, i in enumerate(picks.rows):
        sid, uni = pool_ids[i], int(pool.rows[i])
        records = {c: recs[uni] for c, recs in pool.diagnostics.items()}
        flag_texts = [t for c in req.property_codes if c in records
                      for t in [_flag_words(c, records[c])] if t]
        dist = float(nearest.distance[r])
        near = _nearest_words(picks, r, int(nearest.calibration_row[r]), int(nearest.pick_rank[r]),
                              pool)
        gain = float(rationale.log_det_gain[r])
        lev = float(records[setting.space_code]["leverage"] if setting.space_code in records
                    else rationale.leverage[r])
        spent += cost
        s = pool.samples[sid]
        rows.append({
            "rank": r + 1, "sample_id": s.external_id, "sample_pk": sid, "batch": s.batch,
            "source": s.source or f"file {pool.spectra[sid][0].source_file}", "use": picks.use[r],
            "tests": setting.tests_text, "cost": cost, "cumulative_cost": spent,
            "currency": setting.currency,
            "reason": _reason(picks.method, picks.use[r], r + 1, dist, near, gain, req.metric,
                              "; ".join(flag_texts), has_reference),
            "distance": dist, "nearest_sample": near, "leverage": lev, "log_det_gain": gain,
            "flags": sorted({f for rec in records.values() for f in rec["flags"] if f in SPACE_FLAGS}),
            "diagnostics": {c: {key: rec[key] for key in _DIAGNOSTIC_KEYS}
                            for c, rec in records.items()}})
    return rows


def coverage_benefit(session: Session, setting: SelectionSetting, pool: CandidatePool,
                     space: ScoreSpace, picks: Picks) -> dict[str, Any]:
    """Recent production inside the calibration space now, and an estimate with the picks.

    With a current model (the space model), recent production is what the coverage
    map counts for the same window (:func:`registry.services.views.recent_production`,
    :data:`RECENT_WINDOW_DAYS` before the grade's newest spectrum): "now" is the share
    passing every space check of the model, so it equals the coverage map's figure.
    "After" keeps today's limits fixed: the picks, added as calibration neighbours,
    change only the nearest-neighbour check, so a spectrum counts as brought inside
    when that is the only check it fails and a pick lies within today's limit of it
    in the model's whitened scores (:func:`registry.selection.picking.brought_inside`).
    It is an estimate: a refitted model has a new space and new limits. Without a model the same is done in the run's PCA
    space on the untested candidates of the window, with the calibration reference's
    largest nearest-neighbour distance as the fixed limit.
    """
    trained, mv = setting.space_trained, setting.space_model
    picked = pool.X_universe[pool.rows[picks.rows]]
    if trained is not None:
        rp = recent_production(session, mv, trained, setting.grade, RECENT_WINDOW_DAYS)
        outside, diag = rp["outside"], rp["diagnostics"]
        nn_only = np.array([[f for f in fl if f in SPACE_FLAGS] == ["nearest_neighbour"]
                            for fl in diag.flag_lists()], dtype=bool) if diag is not None else outside
        domain = trained.domain
        limit = float(domain.nn_limit_)
        Z_picks = domain.whitened_scores(trained.preprocessor.transform(on_axis(
            picked, pool.axis, trained.axis)))
        if diag is not None:
            Z_recent = domain.whitened_scores(trained.preprocessor.transform(rp["X"]))
            nn_now = diag.nn_distance
        else:
            Z_recent, nn_now = np.empty((0, Z_picks.shape[1])), np.empty(0)
        weights, where = None, f"the scores of model {mv.label}"
        since, until = rp["since"], rp["until"]
    else:
        last = [max(r.acquired_at for r in pool.spectra[s]) for s in pool.universe]
        until = max(last)
        since = until - timedelta(days=RECENT_WINDOW_DAYS)
        Z_recent = space.T_universe[np.array([t >= since for t in last])]
        Z_picks, weights = space.T_pool[picks.rows], space.eigenvalues
        where = "the selection space (no current model)"
        if space.T_reference.shape[0] >= 2:
            w = (1.0 / np.sqrt(weights)) if weights is not None else np.ones(Z_recent.shape[1])
            ref = space.T_reference * w
            limit = float(cKDTree(ref).query(ref, k=2)[0][:, 1].max())
            nn_now = cKDTree(ref).query(Z_recent * w)[0] if Z_recent.shape[0] else np.empty(0)
            outside = nn_now > limit
            nn_only = outside  # the only check of a space without a model
        else:
            limit, nn_now, outside, nn_only = None, None, None, None
    n = int(Z_recent.shape[0])
    out = {"recent_window_days": RECENT_WINDOW_DAYS, "recent_since": since.isoformat() if since else None,
           "recent_until": until.isoformat() if until else None, "n_recent": n,
           "space": where, "model": mv.label if mv is not None else None, "estimate": True,
           "limits": "today's limits, kept fixed", "nn_limit": limit,
           "n_outside_now": None, "n_brought_inside": None,
           "inside_share_now": None, "inside_share_after": None,
           "largest_gap_now": None, "largest_gap_after": None,
           "distance": "mahalanobis" if (trained is not None or weights is not None) else "euclidean"}
    if n == 0 or outside is None:
        return out
    brought = brought_inside(Z_recent, nn_only, Z_picks, limit, eigenvalues=weights)
    w = (1.0 / np.sqrt(weights)) if weights is not None else np.ones(Z_recent.shape[1])
    to_picks = (cKDTree(Z_picks * w).query(Z_recent * w)[0] if Z_picks.shape[0]
                else np.full(n, np.inf))
    out.update(n_outside_now=int(outside.sum()), n_brought_inside=int(brought.sum()),
               inside_share_now=float(1 - outside.mean()),
               inside_share_after=float(1 - (outside & ~brought).mean()),
               largest_gap_now=float(np.max(nn_now)),
               largest_gap_after=float(np.max(np.minimum(nn_now, to_picks))))
    return out


def selection_parameters(setting: SelectionSetting, pool: CandidatePool, space: ScoreSpace,
                         picks: Picks) -> dict[str, Any]:
    """Everything a replay needs, and what the run was based on (stored with the run)."""
    req = setting.request
    return {
        "property_codes": list(req.property_codes), "grade": setting.grade.code,
        "method": picks.method, "n": req.n, "budget": req.budget, "pool": req.pool,
        "since": req.since.isoformat() if req.since else None,
        "until": req.until.isoformat() if req.until else None,
        "site": setting.site.name if setting.site else None,
        "recipe": req.recipe, "explained_variance": req.explained_variance,
        "n_components": req.n_components, "metric": req.metric,
        "space": {"recipe": space.recipe, "components": int(space.space.n_components_),
                  "explained": float(space.space.explained_variance_ratio_.sum()),
                  "fitted_on": "calibration reference + untested candidates"},
        "model_version": setting.space_model.label if setting.space_model else None,
        "space_property": setting.space_code,
        "leverage": (f"prediction-time leverage of model {setting.space_model.label}"
                     if setting.space_model else "leverage in the selection space"),
        "models": {c: mv.label for c, mv in setting.models.items() if mv is not None},
        "reference_set": pool.reference_text, "n_reference": len(pool.reference_ids),
        "reference_sha256": pool.reference_sha256, "n_untested": len(pool.universe),
        "random_state": picks.random_state,
        "cost_per_sample": setting.cost_per_sample, "currency": setting.currency,
        "tests": [{"method": c.code, "cost": c.cost, "properties": c.properties}
                  for c in setting.charges],
    }


# --------------------------------------------------------------------------- the result
@dataclass
class SelectionResult:
    """A selection run's send list, benefit and the score space it was chosen in.

    ``rows`` are the send-list rows in rank order (see :data:`SEND_LIST_COLUMNS`).
    ``scores_calibration``/``scores_pool`` and ``eigenvalues`` are the space the
    method ran on (rows of the pool in ``pool_sample_ids`` order); ``calibration_limit``
    the calibration reference's Hotelling T² ellipse in scores 1 and 2
    (:func:`registry.selection.picking.t2_ellipse`, at :data:`MAP_LIMIT_CONFIDENCE`).
    ``recommendation`` is the method proposed for the situation (``method``, ``reason``,
    ``evidence``, ``outside_share``) and whether the run ``followed`` it.
    """

    run: SelectionRun | None
    parameters: dict[str, Any]
    rows: list[dict[str, Any]]
    benefit: dict[str, Any]
    pool_sha256: str
    pool_size: int
    cost_per_sample: float
    currency: str
    tests: str
    model_label: str | None
    pool_sample_ids: list[int] = field(default_factory=list)
    calibration_sample_ids: list[int] = field(default_factory=list)
    scores_calibration: np.ndarray | None = None
    scores_pool: np.ndarray | None = None
    eigenvalues: np.ndarray | None = None
    recommendation: dict[str, Any] | None = None
    calibration_limit: np.ndarray | None = None

    @property
    def picked_sample_ids(self) -> list[int]:
        return [r["sample_pk"] for r in self.rows]

    @property
    def total_cost(self) -> float:
        return float(self.rows[-1]["cumulative_cost"]) if self.rows else 0.0

    def summary(self) -> dict[str, Any]:
        """JSON-able view: the run, its send list and benefit."""
        return {"run_id": self.run.id if self.run else None, "parameters": self.parameters,
                "model": self.model_label, "pool_size": self.pool_size,
                "pool_sha256": self.pool_sha256, "tests": self.tests,
                "cost_per_sample": self.cost_per_sample, "currency": self.currency,
                "total_cost": self.total_cost, "benefit": self.benefit,
                "recommendation": self.recommendation,
                "picks": [{k: v for k, v in r.items() if k != "sample_pk"} for r in self.rows]}


def selection_result(session: Session, setting: SelectionSetting, pool: CandidatePool,
                     space: ScoreSpace, picks: Picks,
                     recommendation: Recommendation | None = None) -> SelectionResult:
    """Reasons, benefit and parameters of ``picks`` as one (unstored) result."""
    rec = recommendation or recommend_for(setting, pool)
    return SelectionResult(
        run=None, parameters=selection_parameters(setting, pool, space, picks),
        rows=explain_picks(setting, pool, space, picks),
        benefit=coverage_benefit(session, setting, pool, space, picks), pool_sha256=pool.sha256,
        pool_size=pool.size, cost_per_sample=setting.cost_per_sample, currency=setting.currency,
        tests=setting.tests_text,
        model_label=setting.space_model.label if setting.space_model else None,
        pool_sample_ids=pool.ids, calibration_sample_ids=list(pool.reference_ids),
        scores_calibration=space.T_reference, scores_pool=space.T_pool,
        eigenvalues=space.space.eigenvalues_,
        recommendation={"method": rec.method, "reason": rec.reason, "evidence": rec.evidence,
                        "outside_share": outside_share(setting, pool),
                        "followed": rec.method == picks.method},
        calibration_limit=(t2_ellipse(space.T_reference[:, :2], MAP_LIMIT_CONFIDENCE)
                           if space.T_reference.shape[1] >= 2 else None))


# --------------------------------------------------------------------------- 7. storing
def store_run(session: Session, actor: Actor, result: SelectionResult,
              setting: SelectionSetting) -> SelectionRun:
    """Store the run and its picks and append the audit event (flush only)."""
    model = setting.space_model
    run = SelectionRun(user_id=actor.id, method=result.parameters["method"],
                       parameters=plain_json(result.parameters),
                       property_codes=list(result.parameters["property_codes"]),
                       grade_id=setting.grade.id, model_version_id=model.id if model else None,
                       pool_sha256=result.pool_sha256, pool_size=result.pool_size,
                       budget=setting.request.budget, total_cost=result.total_cost, state="open",
                       benefit=plain_json(result.benefit))
    session.add(run)
    session.flush()
    for row in result.rows:
        session.add(SelectionPick(
            run_id=run.id, sample_id=row["sample_pk"], rank=row["rank"], cost=row["cost"],
            cumulative_cost=row["cumulative_cost"], reason=row["reason"],
            rationale=plain_json({k: row[k] for k in ("use", "source", "tests", "distance",
                                                      "nearest_sample", "leverage",
                                                      "log_det_gain", "flags", "diagnostics")})))
    session.flush()
    audit(session, actor, Action.SELECTION_RUN, entity_type="selection_run", entity_id=run.id,
          data={"method": run.method, "properties": run.property_codes, "grade": setting.grade.code,
                "pool_sha256": run.pool_sha256, "pool_size": run.pool_size, "budget": run.budget,
                "total_cost": run.total_cost, "model": model.label if model else None,
                "picks": [[r["rank"], r["sample_pk"], r["sample_id"], r["cost"]] for r in result.rows]})
    return run


# --------------------------------------------------------------------------- the action
def run_selection(session: Session, actor: Actor, *, property_codes: list[str], grade: str,
                  method: str | None = None, n: int | None = None,
                  budget: float | None = None, pool: str = "unreferenced", since: datetime | None = None,
                  until: datetime | None = None, site: str | None = None,
                  recipe: list[dict] | None = None, explained_variance: float = 0.99,
                  n_components: int | str | None = None, metric: str = "mahalanobis",
                  space_property: str | None = None,
                  progress: Progress | None = None, store: bool = True,
                  ignore_run_id: int | None = None) -> SelectionResult:
    """Choose samples to send for reference testing and store the run.

    Parameters
    ----------
    property_codes : list of str
        Properties to test each picked sample for (their methods' costs add up;
        one method serving several properties is charged once).
    grade : str
        Grade code; only samples of this grade are candidates.
    method : {"kennard-stone", "d-optimal", "duplex", "spxy"}, optional
        None: the method :func:`recommend_for` proposes for the situation.
    n, budget
        Exactly one: pick ``n`` samples, or as many (in rank order) as ``budget`` buys.
    pool : {"unreferenced", "outside-coverage"}
    since, until : datetime, optional
        Keep samples with a spectrum acquired in [since, until).
    site : str, optional
        Keep samples of this site.
    recipe : list of dict, optional
        Preprocessing recipe of the space (default: the current model's, else
        :data:`registry.services.models.DEFAULT_RECIPE`).
    explained_variance : float
        PCA components kept by cumulative explained variance (default 99 %).
    n_components : int or "model", optional
        A fixed component count, or ``"model"`` for the current model's own count.
    metric : {"mahalanobis", "euclidean"}
        Distances on the scores: Mahalanobis H² = Σₐ Δtₐ²/λₐ (ASTM E1655, from memory) or Euclidean.
    space_property : str, optional
        The property whose current model gives the space (default: the costliest test's).
    progress : callable, optional
        ``progress(stage, done, total)`` while loading spectra and picking.
    store : bool
        False computes the send list without writing anything (a preview).
    ignore_run_id : int, optional
        Treat this run's picks as not sent (used to replay a stored run).

    Returns
    -------
    SelectionResult
    """
    authorize(actor, Action.SELECTION_RUN)
    request = check_request(property_codes=property_codes, grade=grade, method=method, n=n,
                            budget=budget, pool=pool, since=since, until=until, site=site,
                            recipe=recipe, explained_variance=explained_variance,
                            n_components=n_components, metric=metric,
                            space_property=space_property)
    return run_request(session, actor, request, progress=progress, store=store,
                       ignore_run_id=ignore_run_id)


def _request_fields(request: SelectionRequest) -> dict[str, Any]:
    """``check_request`` arguments that give ``request`` again."""
    fields = {f: getattr(request, f) for f in SelectionRequest.__dataclass_fields__}
    fields["property_codes"] = list(fields["property_codes"])
    return fields


def run_request(session: Session, actor: Actor, request: SelectionRequest, *,
                progress: Progress | None = None, store: bool = True,
                ignore_run_id: int | None = None) -> SelectionResult:
    """:func:`run_selection` for a request already checked by :func:`check_request`."""
    authorize(actor, Action.SELECTION_RUN)
    setting = resolve_request(session, request)
    candidates = build_pool(session, setting, ignore_run_id=ignore_run_id, progress=progress)
    recommendation = recommend_for(setting, candidates)
    if request.method is None:
        # the recommended method, checked as if the user had named it
        setting.request = check_request(**{**_request_fields(request),
                                           "method": recommendation.method})
    space = build_space(setting, candidates)
    picks = choose_picks(setting, candidates, space, progress=progress)
    result = selection_result(session, setting, candidates, space, picks, recommendation)
    if store:
        result.run = store_run(session, actor, result, setting)
    return result
