"""Selection runs: which untested samples to send for reference testing, within a budget.

A lab manager asks for ``n`` samples, or as many as a budget buys, to be rated
by the primary test methods of one or more properties. The registry

1. builds the *pool*: samples of the grade that have no valid (or suspect)
   reference result for any of the requested properties, are not already
   waiting in an open selection run for one of them, and (optionally) were
   measured in a date range or at one site; with ``pool="outside-coverage"``
   only those the current model flags as outside its space (leverage,
   Hotelling T², Q residual or nearest-neighbour check, domain notes §4);
2. builds the *calibration reference*: the calibration members of the
   current model's frozen set or, without a model, every sample of the grade
   with a valid reference value for one of the properties;
3. projects both into one PCA space (:class:`registry.selection.SelectionSpace`)
   after the current model's recipe (or a given one), one row per sample
   (the mean of its replicate spectra);
4. ranks the pool by Kennard–Stone in augment mode (the calibration rows are
   already selected), D-optimal with the calibration rows fixed, or Duplex
   (a fresh calibration/validation pair of sets, see :data:`METHODS`);
5. cuts the ranking to ``n`` or to the budget, explains every pick in words
   and numbers, and estimates the benefit (share of recent production inside
   the calibration space now and with the picks, largest gap now and after).

The *current model* of a property and grade is the newest version in state
``active``; failing that the newest ``approved`` or ``validated`` one; failing
that there is none and the space is plain PCA on the default recipe.
Several properties: the first requested property that has a current model
defines the space; every current model's flags are reported and, with
``outside-coverage``, a sample flagged by any of them is kept.

Every run is stored with its parameters, a content hash of the pool and its
picks, and is deterministic: candidates are ordered by sample id and the
D-optimal random starts are seeded from the pool hash.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, Callable

import numpy as np
from sqlmodel import Session, select

from ..errors import InputError
from ..lifecycle.permissions import Action
from ..lineage.canonical import content_hash
from ..selection import (SelectionSpace, budget_positions, coverage_summary, d_optimal, duplex,
                         kennard_stone, pick_rationale)
from ..spectra.axes import resample
from ..spectra.preprocessing import Recipe
from ..storage.models import (CalibrationMember, Grade, ModelVersion, Property, ReferenceMethod,
                              ReferenceResult, Sample, SelectionPick, SelectionRun, Site,
                              Spectrum)
from ..storage.spectra_store import axis_values, load_matrix
from ..storage.types import as_utc
from .admin import get_grade, get_property, get_site
from .context import Actor, audit, authorize
from .models import DEFAULT_RECIPE, load_trained
from .references import calibration_values

#: ``kennard-stone``: maximin augment of the current calibration (Kennard & Stone 1969).
#: ``d-optimal``: Fedorov exchange maximising det(ZᵀZ), Z = [1, scores], calibration rows
#: fixed (Ferré & Rius 1996). ``duplex``: Snee (1977) on the pool alone; the picks form a
#: new calibration set and an independent validation set (about half each), e.g. for a new
#: grade; the current calibration does not steer it.
METHODS = ("kennard-stone", "d-optimal", "duplex")
POOLS = ("unreferenced", "outside-coverage")
METRICS = ("mahalanobis", "euclidean")
SPACE_FLAGS = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour")
# Recent production for the benefit figures: spectra of the last 90 days before the newest
# candidate spectrum (anchored on the data, not the clock, so a re-run gives the same figures).
RECENT_WINDOW_DAYS = 90
_LOAD_BLOCK = 2000
_HAS_RESULT = ("valid", "suspect")  # suspect results await review: the sample is not untested

_FLAG_WORDS = {
    "leverage": ("leverage", "leverage", "leverage_limit"),
    "hotelling_t2": ("Hotelling T²", "t2", "t2_limit"),
    "q_residual": ("Q residual", "q", "q_limit"),
    "nearest_neighbour": ("nearest-neighbour distance", "nn_distance", "nn_limit"),
}

Progress = Callable[[str, int, int], None]


@dataclass
class SelectionResult:
    """A selection run's send list, benefit and the score space it was chosen in.

    ``rows`` are the send-list rows in rank order (see :data:`SEND_LIST_COLUMNS`).
    ``scores_calibration``/``scores_pool`` and ``eigenvalues`` are the space the
    method ran on (rows of the pool in ``pool_sample_ids`` order).
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
                "picks": [{k: v for k, v in r.items() if k != "sample_pk"} for r in self.rows]}


SEND_LIST_COLUMNS = ("rank", "sample_id", "batch", "source", "use", "tests", "cost",
                     "cumulative_cost", "reason", "distance", "nearest_sample", "leverage",
                     "log_det_gain", "flags")


# --------------------------------------------------------------------------- inputs
@dataclass
class _Test:
    code: str
    cost: float
    currency: str
    properties: list[str]


def _tests_for(session: Session, props: list[Property]) -> list[_Test]:
    """One test per distinct method code: T10/T50/T90 share one ASTM D86 run (charged once)."""
    tests: dict[str, _Test] = {}
    for prop in props:
        methods = session.exec(select(ReferenceMethod).where(
            ReferenceMethod.property_id == prop.id, ReferenceMethod.active == True)  # noqa: E712
            .order_by(ReferenceMethod.cost, ReferenceMethod.id)).all()
        if not methods:
            raise InputError(f"property {prop.code} has no active reference method, so a "
                             "sample cannot be sent for it", field="--property")
        m = methods[0]  # the cheapest active method (ties: the oldest)
        key = m.code.upper()
        if key in tests:
            tests[key].cost = max(tests[key].cost, float(m.cost))
            tests[key].properties.append(prop.code)
        else:
            tests[key] = _Test(m.code, float(m.cost), m.currency, [prop.code])
    currencies = {t.currency for t in tests.values()}
    if len(currencies) > 1:
        raise InputError(f"the methods are priced in several currencies ({', '.join(sorted(currencies))}); "
                         "set one currency for all of them", field="--property")
    return list(tests.values())


def current_model(session: Session, prop: Property, grade: Grade) -> ModelVersion | None:
    """Active version if any, else the newest approved/validated one, else None."""
    for states in (("active",), ("approved", "validated")):
        mv = session.exec(select(ModelVersion).where(
            ModelVersion.property_id == prop.id, ModelVersion.grade_id == grade.id,
            ModelVersion.state.in_(states)).order_by(ModelVersion.id.desc())).first()
        if mv is not None:
            return mv
    return None


def _check_request(method, n, budget, pool, metric, explained_variance, n_components,
                   since, until) -> None:
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; use one of {', '.join(METHODS)}",
                         field="--method")
    if (n is None) == (budget is None):
        raise InputError("give either a number of samples or a budget, not both",
                         field="--n/--budget")
    if n is not None and (isinstance(n, bool) or int(n) != n or n < 1):
        raise InputError(f"the number of samples must be a positive whole number, got {n!r}", field="--n")
    if budget is not None and not (math.isfinite(budget) and budget > 0):
        raise InputError(f"the budget must be a positive amount, got {budget!r}", field="--budget")
    if method == "duplex" and n is not None and n < 4:
        raise InputError("duplex needs at least 4 picks (two for calibration, two for "
                         "validation)", field="--n")
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
    if since is not None and until is not None and as_utc(since) >= as_utc(until):
        raise InputError("the start date must be before the end date", field="--since")


# --------------------------------------------------------------------------- data gathering
def _grade_spectra(session: Session, grade: Grade, site: Site | None, since, until
                   ) -> dict[int, list[tuple[int, int, str, str, datetime]]]:
    q = (select(Spectrum.id, Spectrum.sample_id, Spectrum.axis_id, Spectrum.sha256,
                Spectrum.source_file, Spectrum.acquired_at)
         .join(Sample, Sample.id == Spectrum.sample_id).where(Sample.grade_id == grade.id))
    if site is not None:
        q = q.where(Sample.site_id == site.id)
    out: dict[int, list] = {}
    for sid, sample_id, axis_id, digest, file, acquired in session.exec(q.order_by(Spectrum.id)).all():
        out.setdefault(sample_id, []).append((sid, axis_id, digest, file, as_utc(acquired)))
    if since is not None or until is not None:
        lo, hi = as_utc(since), as_utc(until)
        # a sample is in the range when one of its spectra was acquired in it
        out = {s: rows for s, rows in out.items()
               if any((lo is None or t >= lo) and (hi is None or t < hi) for *_, t in rows)}
    return out


def _tested_samples(session: Session, props: list[Property]) -> set[int]:
    method_ids = [m.id for m in session.exec(select(ReferenceMethod).where(
        ReferenceMethod.property_id.in_([p.id for p in props]))).all()]
    if not method_ids:
        return set()
    return set(session.exec(select(ReferenceResult.sample_id).where(
        ReferenceResult.method_id.in_(method_ids),
        ReferenceResult.status.in_(_HAS_RESULT)).distinct()).all())


def _waiting_samples(session: Session, codes: list[str], ignore_run_id: int | None) -> set[int]:
    """Samples already sent for one of ``codes`` in an open selection run."""
    out: set[int] = set()
    for sample_id, run_codes, run_id in session.exec(
            select(SelectionPick.sample_id, SelectionRun.property_codes, SelectionRun.id)
            .join(SelectionRun, SelectionRun.id == SelectionPick.run_id)
            .where(SelectionRun.state == "open")).all():
        if run_id != ignore_run_id and set(run_codes or []) & set(codes):
            out.add(sample_id)
    return out


def _reference_samples(session: Session, props: list[Property], grade: Grade,
                       model: ModelVersion | None) -> tuple[list[int], dict[int, list[int]] | None, str]:
    """Calibration reference: (sample ids, spectrum ids per sample or None = all, description)."""
    if model is not None:
        members = session.exec(select(CalibrationMember).where(
            CalibrationMember.set_id == model.calibration_set_id,
            CalibrationMember.role == "cal").order_by(CalibrationMember.sample_id)).all()
        return ([m.sample_id for m in members], {m.sample_id: list(m.spectrum_ids) for m in members},
                f"calibration members of model {model.label}")
    grade_samples = session.exec(select(Sample.id).where(Sample.grade_id == grade.id)).all()
    referenced: set[int] = set()
    for prop in props:
        referenced |= set(calibration_values(session, grade_samples, prop.id))
    return (sorted(referenced), None,
            f"samples of grade {grade.code} with a valid {'/'.join(p.code for p in props)} value")


def _mean_spectra(session: Session, spectrum_ids: list[list[int]], axis_of: dict[int, int],
                  target_axis: np.ndarray, progress: Progress | None, label: str) -> np.ndarray:
    """One row per sample: the mean of its spectra, on ``target_axis``."""
    flat = [sid for ids in spectrum_ids for sid in ids]
    owner = np.repeat(np.arange(len(spectrum_ids)), [len(ids) for ids in spectrum_ids])
    sums = np.zeros((len(spectrum_ids), target_axis.size))
    axis_cache: dict[int, np.ndarray] = {}
    done = 0
    for start in range(0, len(flat), _LOAD_BLOCK):
        part = flat[start:start + _LOAD_BLOCK]
        rows = owner[start:start + _LOAD_BLOCK]
        by_axis: dict[int, list[int]] = {}
        for k, sid in enumerate(part):
            by_axis.setdefault(axis_of[sid], []).append(k)
        for axis_id, ks in by_axis.items():
            X, axis_row = load_matrix(session, [part[k] for k in ks])
            x = axis_cache.setdefault(axis_id, axis_values(axis_row))
            if not (x.shape == target_axis.shape and np.array_equal(x, target_axis)):
                X = resample(X, x, target_axis, kind="linear")
            np.add.at(sums, rows[ks], X)
        done += len(part)
        if progress is not None:
            progress(label, done, len(flat))
    counts = np.array([len(ids) for ids in spectrum_ids], dtype=np.float64)
    return sums / counts[:, None]


# --------------------------------------------------------------------------- explaining
def _flag_words(prop_code: str, record: dict) -> str:
    parts = []
    for flag in record["flags"]:
        if flag in _FLAG_WORDS:
            words, value, limit = _FLAG_WORDS[flag]
            parts.append(f"{words} {record[value]:.3g} > limit {record[limit]:.3g}")
    return f"outside the {prop_code} model's space ({'; '.join(parts)})" if parts else ""


def _nearest_labels(S_cal: np.ndarray, S_pool: np.ndarray, picks: np.ndarray,
                    cal_labels: list[str], pool_labels: list[str]) -> list[tuple[float, str]]:
    """For each pick: distance to, and name of, the nearest calibration sample or earlier pick."""
    out = []
    for r, i in enumerate(picks):
        before = np.vstack([S_cal, S_pool[picks[:r]]])
        if before.shape[0] == 0:
            out.append((float("nan"), ""))
            continue
        d = np.sqrt(((before - S_pool[i]) ** 2).sum(axis=1))
        j = int(np.argmin(d))
        label = (f"calibration sample {cal_labels[j]}" if j < len(cal_labels) else
                 f"earlier pick {pool_labels[picks[j - len(cal_labels)]]} "
                 f"(rank {j - len(cal_labels) + 1})")
        out.append((float(d[j]), label))
    return out


def _reason(method: str, use: str, rank: int, dist: float, nearest: str, lev: float, gain: float,
            metric: str, flags_text: str, has_reference: bool) -> str:
    what = "Mahalanobis distance" if metric == "mahalanobis" else "distance"
    near = f"{what} {dist:.3g} to the nearest {nearest}" if nearest else ""
    if method == "kennard-stone":
        # without a calibration the first two picks are the most distant pair of the pool
        text = (f"largest remaining gap in the calibration space: {near}"
                if has_reference or rank > 2 else
                "one of the two most different samples of the pool" + (f" ({near})" if near else ""))
    elif method == "d-optimal":
        text = (f"raises ln det(Z'Z) by {gain:.3g} (leverage {lev:.3g})" if math.isfinite(gain)
                else "needed with the other picks to make the design estimable")
        text += f"; {near}" if near else ""
    else:
        text = (f"for {use}: Duplex maximin pick, {near}" if near else
                f"for {use}: one of the two most different samples left for the {use} set")
    return f"{text}; {flags_text}" if flags_text else text


# --------------------------------------------------------------------------- the action
def run_selection(session: Session, actor: Actor, *, property_codes: list[str], grade: str,
                  method: str, n: int | None = None, budget: float | None = None,
                  pool: str = "unreferenced", since: datetime | None = None,
                  until: datetime | None = None, site: str | None = None,
                  recipe: list[dict] | None = None, explained_variance: float = 0.99,
                  n_components: int | str | None = None, metric: str = "mahalanobis",
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
    method : {"kennard-stone", "d-optimal", "duplex"}
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
        Distances on the scores: Mahalanobis H² = Σₐ Δtₐ²/λₐ (domain notes §3) or Euclidean.
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
    codes = [c.strip().upper() for c in (property_codes or []) if c and c.strip()]
    if not codes:
        raise InputError("name at least one property to test", field="--property")
    if len(set(codes)) != len(codes):
        raise InputError("a property is named twice", field="--property")
    _check_request(method, n, budget, pool, metric, explained_variance, n_components, since, until)
    props = [get_property(session, c) for c in codes]
    grade_row = get_grade(session, grade)
    site_row = get_site(session, site) if site else None
    tests = _tests_for(session, props)
    cost = float(sum(t.cost for t in tests))
    currency = tests[0].currency
    tests_text = " + ".join(f"{t.code} ({'/'.join(t.properties)})" for t in tests)
    if budget is not None and cost > budget * (1 + 1e-9):
        raise InputError(f"the budget {budget:g} {currency} does not cover one sample: "
                         f"{tests_text} cost {cost:g} {currency} per sample", field="--budget")

    models = {p.code: current_model(session, p, grade_row) for p in props}
    space_model = next((models[c] for c in codes if models[c] is not None), None)
    if n_components == "model" and space_model is None:
        raise InputError("components taken from the model need a current model for the property and grade",
                         field="--components")
    trained = {c: load_trained(mv) for c, mv in models.items() if mv is not None}
    space_trained = trained[next(c for c in codes if models[c] is space_model)] if space_model else None
    if recipe is not None:
        recipe = Recipe.from_json(recipe).to_json()

    # ---- pool and calibration reference
    spectra = _grade_spectra(session, grade_row, site_row, since, until)
    excluded = _tested_samples(session, props) | _waiting_samples(session, codes, ignore_run_id)
    universe = sorted(s for s in spectra if s not in excluded)
    if not universe:
        raise InputError(f"no candidate samples: every {grade_row.code} sample with a spectrum"
                         f"{' in the date range' if since or until else ''}"
                         f"{' at ' + site_row.name if site_row else ''} already has a "
                         f"{'/'.join(codes)} result or is waiting in an open selection run",
                         field="--pool")
    cal_ids, cal_spectra, reference_text = _reference_samples(session, props, grade_row, space_model)
    all_cal = {}
    if cal_ids:
        rows = session.exec(select(Spectrum.id, Spectrum.sample_id, Spectrum.axis_id, Spectrum.sha256)
                            .where(Spectrum.sample_id.in_(cal_ids)).order_by(Spectrum.id)).all()
        for sid, sample_id, axis_id, digest in rows:
            if cal_spectra is None or sid in cal_spectra.get(sample_id, ()):
                all_cal.setdefault(sample_id, []).append((sid, axis_id, digest))
        cal_ids = [s for s in cal_ids if s in all_cal]
    axis_of = {sid: a for rows in spectra.values() for sid, a, *_ in rows}
    axis_of.update({sid: a for rows in all_cal.values() for sid, a, _ in rows})
    if space_trained is not None:
        target_axis = space_trained.axis
    else:
        counts: dict[int, int] = {}
        for a in axis_of.values():
            counts[a] = counts.get(a, 0) + 1
        axis_id = min(counts, key=lambda a: (-counts[a], a))  # most common axis, then lowest id
        from ..storage.models import SpectralAxis

        target_axis = axis_values(session.get(SpectralAxis, axis_id))

    X_uni = _mean_spectra(session, [[r[0] for r in spectra[s]] for s in universe], axis_of,
                          target_axis, progress, "loading candidate spectra")
    X_cal = (_mean_spectra(session, [[r[0] for r in all_cal[s]] for s in cal_ids], axis_of,
                           target_axis, progress, "loading calibration spectra")
             if cal_ids else np.empty((0, target_axis.size)))

    # ---- the current models' view of every candidate
    diag_records: dict[str, list[dict]] = {}
    for code, tm in trained.items():
        X_m = X_uni if np.array_equal(tm.axis, target_axis) else resample(X_uni, target_axis, tm.axis)
        _, diag = tm.predict(X_m)
        diag_records[code] = diag.records()
    flagged = np.array([any(f in SPACE_FLAGS for recs in diag_records.values() for f in recs[i]["flags"])
                        for i in range(len(universe))], dtype=bool)
    if pool == "outside-coverage":
        if not trained:
            raise InputError(f"the outside-coverage pool needs a current model for "
                             f"{'/'.join(codes)} on grade {grade_row.code}; there is none",
                             field="--pool")
        pool_rows = np.flatnonzero(flagged)
        if pool_rows.size == 0:
            raise InputError(f"no candidate sample lies outside the current model's space "
                             f"({len(universe)} untested samples checked)", field="--pool")
    else:
        pool_rows = np.arange(len(universe))
    pool_ids = [universe[i] for i in pool_rows]

    samples = {s.id: s for s in samples_by_id(session, pool_ids + cal_ids)}
    pool_digest = content_hash([[sid, [r[2] for r in spectra[sid]]] for sid in pool_ids])
    cal_digest = content_hash([[sid, [r[2] for r in all_cal[sid]]] for sid in cal_ids])

    # ---- the selection space
    X_all = np.vstack([X_cal, X_uni])
    if recipe is None and space_trained is not None:
        used_recipe = space_trained.recipe
        X_pre = space_trained.preprocessor.transform(X_all)  # the model's own fitted recipe
    else:
        used_recipe = recipe if recipe is not None else DEFAULT_RECIPE
        X_pre = Recipe.from_json(used_recipe).build(target_axis).fit_transform(X_all)
    fixed_a = space_model.n_components if n_components == "model" else n_components
    space = SelectionSpace(explained_variance=explained_variance, n_components=fixed_a).fit(X_pre)
    T_all = space.transform(X_pre)
    n_cal = len(cal_ids)
    T_cal, T_uni = T_all[:n_cal], T_all[n_cal:]
    T_pool = T_uni[pool_rows]
    eig = space.eigenvalues_ if metric == "mahalanobis" else None

    # ---- how many picks
    n_pool = len(pool_ids)
    if n is not None:
        k = int(n)
        if k > n_pool:
            raise InputError(f"{k} samples asked for but the pool has only {n_pool} candidate samples",
                             field="--n")
    else:
        k = int(budget_positions(np.full(n_pool, cost), budget).size)
    if method == "duplex" and k < 4:
        raise InputError(f"duplex needs at least 4 picks; the budget buys {k}", field="--budget")
    seed = int(pool_digest[:8], 16)
    use = ["calibration"] * k
    if method == "kennard-stone":
        T = np.vstack([T_cal, T_pool])
        tick = (lambda done: progress("selecting", done, k)) if progress else None
        picks = kennard_stone(T, k, already_selected=np.arange(n_cal) if n_cal else None,
                              metric=metric, eigenvalues=eig, progress=tick) - n_cal
    elif method == "d-optimal":
        T = np.vstack([T_cal, T_pool])
        res = d_optimal(T, k, already_selected=np.arange(n_cal) if n_cal else None,
                        random_state=seed)
        picks = np.asarray(res.indices) - n_cal
    else:
        n_val = k // 2
        cal_idx, val_idx = duplex(T_pool, k - n_val, n_val, metric=metric, eigenvalues=eig)
        picks, use = _duplex_order(cal_idx, val_idx)
    picks = np.asarray(picks, dtype=np.int64)

    # ---- explain
    rationale = pick_rationale(T_cal, T_pool, picks, eigenvalues=eig)
    w = 1.0 / np.sqrt(eig) if eig is not None else np.ones(T_pool.shape[1])
    cal_labels = [samples[s].external_id for s in cal_ids]
    pool_labels = [samples[s].external_id for s in pool_ids]
    if method == "duplex":
        nearest = _duplex_nearest(T_pool * w, picks, use, pool_labels)
    else:
        nearest = _nearest_labels(T_cal * w, T_pool * w, picks, cal_labels, pool_labels)
    rows = []
    spent = 0.0
    for r, i in enumerate(picks):
        sid = pool_ids[i]
        uni_row = int(pool_rows[i])
        flag_texts = [t for c in codes if c in diag_records
                      for t in [_flag_words(c, diag_records[c][uni_row])] if t]
        flags = sorted({f for c in diag_records for f in diag_records[c][uni_row]["flags"]
                        if f in SPACE_FLAGS})
        dist, near = nearest[r]
        lev, gain = float(rationale.leverage[r]), float(rationale.log_det_gain[r])
        spent += cost
        s = samples[sid]
        rows.append({
            "rank": r + 1, "sample_id": s.external_id, "sample_pk": sid, "batch": s.batch,
            "source": s.source or f"file {spectra[sid][0][3]}", "use": use[r],
            "tests": tests_text, "cost": cost,
            "cumulative_cost": spent,
            "reason": _reason(method, use[r], r + 1, dist, near, lev, gain, metric,
                              "; ".join(flag_texts), n_cal > 0),
            "distance": dist, "nearest_sample": near, "leverage": lev, "log_det_gain": gain,
            "flags": flags,
            "diagnostics": {c: {key: diag_records[c][uni_row][key] for key in
                                ("leverage", "leverage_limit", "t2", "t2_limit", "q", "q_limit",
                                 "nn_distance", "nn_limit", "y_pred")}
                            for c in diag_records}})

    benefit = _benefit(T_cal, T_uni, T_pool[picks], universe, spectra, eig)
    parameters = {
        "property_codes": codes, "grade": grade_row.code, "method": method, "n": n,
        "budget": budget, "pool": pool, "since": as_utc(since).isoformat() if since else None,
        "until": as_utc(until).isoformat() if until else None, "site": site_row.name if site_row else None,
        "recipe": recipe, "explained_variance": explained_variance, "n_components": n_components,
        "metric": metric, "space": {"recipe": used_recipe, "components": int(space.n_components_),
                                    "explained": float(space.explained_variance_ratio_.sum()),
                                    "fitted_on": "calibration reference + untested candidates"},
        "model_version": space_model.label if space_model else None,
        "models": {c: mv.label for c, mv in models.items() if mv is not None},
        "reference_set": reference_text, "n_reference": n_cal,
        "reference_sha256": cal_digest, "n_untested": len(universe),
        "random_state": seed if method == "d-optimal" else None,
        "cost_per_sample": cost, "currency": currency,
        "tests": [{"method": t.code, "cost": t.cost, "properties": t.properties} for t in tests],
    }
    result = SelectionResult(
        run=None, parameters=parameters, rows=rows, benefit=benefit, pool_sha256=pool_digest,
        pool_size=n_pool, cost_per_sample=cost, currency=currency, tests=tests_text,
        model_label=space_model.label if space_model else None, pool_sample_ids=pool_ids,
        calibration_sample_ids=cal_ids, scores_calibration=T_cal, scores_pool=T_pool,
        eigenvalues=space.eigenvalues_)
    if store:
        result.run = _store(session, actor, result, grade_row, space_model, budget)
    return result


def _duplex_order(cal_idx, val_idx) -> tuple[list[int], list[str]]:
    """Duplex's own pick order: two calibration, two validation, then alternating."""
    order, use = [], []
    cal, val = list(cal_idx), list(val_idx)
    for group, name in ((cal[:2], "calibration"), (val[:2], "validation")):
        order += group
        use += [name] * len(group)
    for k in range(2, max(len(cal), len(val))):
        for seq, name in ((cal, "calibration"), (val, "validation")):
            if k < len(seq):
                order.append(seq[k])
                use.append(name)
    return order, use


def _duplex_nearest(S_pool, picks, use, labels) -> list[tuple[float, str]]:
    """Distance to the nearest earlier pick of the same set (Duplex's own criterion)."""
    out = []
    for r, i in enumerate(picks):
        same = [picks[j] for j in range(r) if use[j] == use[r]]
        if not same:
            out.append((float("nan"), ""))
            continue
        d = np.sqrt(((S_pool[same] - S_pool[i]) ** 2).sum(axis=1))
        j = int(np.argmin(d))
        out.append((float(d[j]), f"earlier {use[r]} pick {labels[same[j]]}"))
    return out


def _benefit(T_cal, T_uni, T_picks, universe, spectra, eig) -> dict[str, Any]:
    """Coverage of recent production now and with the picks (domain notes §4, nearest neighbour)."""
    newest = max(t for s in universe for *_, t in spectra[s])
    since = newest - timedelta(days=RECENT_WINDOW_DAYS)
    recent = np.array([max(t for *_, t in spectra[s]) >= since for s in universe])
    T_recent = T_uni[recent]
    w = 1.0 / np.sqrt(eig) if eig is not None else np.ones(T_uni.shape[1])
    out: dict[str, Any] = {"recent_window_days": RECENT_WINDOW_DAYS,
                           "recent_since": since.isoformat(), "n_recent": int(recent.sum()),
                           "distance": "mahalanobis" if eig is not None else "euclidean"}

    def largest_gap(ref):
        if ref.shape[0] == 0:
            return None
        gaps = np.empty(T_recent.shape[0])
        scaled = ref * w
        for a in range(0, T_recent.shape[0], 200):
            blk = T_recent[a:a + 200] * w
            d2 = ((blk[:, None, :] - scaled[None, :, :]) ** 2).sum(axis=2)
            gaps[a:a + 200] = np.sqrt(d2.min(axis=1))
        return float(gaps.max())

    after = np.vstack([T_cal, T_picks])
    out["largest_gap_now"] = largest_gap(T_cal)
    out["largest_gap_after"] = largest_gap(after)
    if T_cal.shape[0] >= 2:
        cov = coverage_summary(T_cal, T_recent, T_picks, eigenvalues=eig)
        out.update(inside_share_now=cov.inside_share_now, inside_share_after=cov.inside_share_after,
                   nn_limit_now=cov.max_nn_now, nn_limit_after=cov.max_nn_after)
    elif after.shape[0] >= 2:
        cov = coverage_summary(after, T_recent, np.empty((0, T_cal.shape[1])), eigenvalues=eig)
        out.update(inside_share_now=None, inside_share_after=cov.inside_share_now,
                   nn_limit_now=None, nn_limit_after=cov.max_nn_now)
    return out


def samples_by_id(session: Session, ids: list[int]) -> list[Sample]:
    """The samples with these ids (any order), in blocks below the bound-parameter limit."""
    out = []
    for a in range(0, len(ids), 900):
        out += session.exec(select(Sample).where(Sample.id.in_(ids[a:a + 900]))).all()
    return out


def _store(session: Session, actor: Actor, result: SelectionResult, grade: Grade,
           model: ModelVersion | None, budget: float | None) -> SelectionRun:
    run = SelectionRun(user_id=actor.id, method=result.parameters["method"],
                       parameters=_jsonable(result.parameters),
                       property_codes=list(result.parameters["property_codes"]),
                       grade_id=grade.id, model_version_id=model.id if model else None,
                       pool_sha256=result.pool_sha256, pool_size=result.pool_size, budget=budget,
                       total_cost=result.total_cost, state="open",
                       benefit=_jsonable(result.benefit))
    session.add(run)
    session.flush()
    for row in result.rows:
        session.add(SelectionPick(
            run_id=run.id, sample_id=row["sample_pk"], rank=row["rank"], cost=row["cost"],
            cumulative_cost=row["cumulative_cost"], reason=row["reason"],
            rationale=_jsonable({k: row[k] for k in ("use", "source", "tests", "distance",
                                                     "nearest_sample",
                                                     "leverage", "log_det_gain", "flags",
                                                     "diagnostics")})))
    session.flush()
    audit(session, actor, Action.SELECTION_RUN, entity_type="selection_run", entity_id=run.id,
          data={"method": run.method, "properties": run.property_codes, "grade": grade.code,
                "pool_sha256": run.pool_sha256, "pool_size": run.pool_size, "budget": budget,
                "total_cost": run.total_cost, "model": model.label if model else None,
                "picks": [[r["rank"], r["sample_pk"], r["sample_id"], r["cost"]] for r in result.rows]})
    return run


def _jsonable(obj: Any) -> Any:
    """Plain JSON (NaN → None) for JSON columns."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, datetime):
        return as_utc(obj).isoformat()
    return obj
