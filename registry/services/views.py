"""Read-only views for the front end: pick lists, recent predictions, coverage map, QC charts, traces.

Every function checks ``view`` (every role holds it, but a signed-in user is
needed), reads through the storage layer and writes nothing, so nothing is
audited.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import numpy as np
from sklearn.decomposition import PCA
from sqlalchemy import func
from sqlmodel import Session, select

from ..chemometrics.diagnostics import CHECK_WORDS, FLAG_NAMES
from ..errors import InputError, NotFoundError
from ..lifecycle.permissions import Action
from ..storage.models import (CalibrationMember, CalibrationSet, Grade, Instrument, ModelVersion,
                              Prediction, Property, QCResult, ReferenceMethod, Sample, Site,
                              Spectrum, User)
from ..storage.spectra_store import axis_values, load_matrix, load_on_axis
from ..storage.types import as_utc
from .admin import get_grade, get_property
from .calibration import members_of
from .context import Actor, authorize
from .models import current_model, get_model, load_trained
from .predictions import SPACE_FLAGS

#: Largest number of recent spectra a coverage map loads (newest first), to keep the page fast.
MAX_RECENT = 5000


# --------------------------------------------------------------------------- pick lists

def catalog(session: Session, actor: Actor) -> dict[str, list[dict]]:
    """Properties, grades, sites, instruments and reference methods, for pick lists."""
    authorize(actor, Action.VIEW)
    sites = {s.id: s for s in session.exec(select(Site).order_by(Site.name)).all()}
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    return {
        "properties": [{"code": p.code, "name": p.name, "unit": p.unit}
                       for p in session.exec(select(Property).order_by(Property.code)).all()],
        "grades": [{"code": g.code, "name": g.name, "family": g.family}
                   for g in session.exec(select(Grade).order_by(Grade.code)).all()],
        "sites": [{"name": s.name, "timezone": s.timezone} for s in sites.values()],
        "instruments": [{"serial": i.serial, "site": sites[i.site_id].name, "active": i.active,
                         "range_cm1": [i.range_low_cm1, i.range_high_cm1],
                         "resolution_cm1": i.resolution_cm1}
                        for i in session.exec(select(Instrument).order_by(Instrument.serial)).all()],
        "methods": [{"code": m.code, "property": props.get(m.property_id), "cost": m.cost,
                     "currency": m.currency, "active": m.active}
                    for m in session.exec(select(ReferenceMethod).order_by(ReferenceMethod.code)).all()],
    }


def users(session: Session, actor: Actor) -> list[dict]:
    """Every user with roles and whether the account may sign in (no password hashes)."""
    authorize(actor, Action.VIEW)
    return [{"name": u.name, "full_name": u.full_name, "roles": sorted(u.roles or []),
             "active": bool(u.active), "created_at": as_utc(u.created_at)}
            for u in session.exec(select(User).order_by(User.name)).all()]


def _precision_text(spec: dict | None) -> str:
    """A precision spec (r or R) in words: "0.2", "-2.2 + 0.125·X", "0.029·X"."""
    if not spec:
        return ""
    kind = spec.get("kind")
    if kind == "constant":
        return f"{spec['value']:g}"
    if kind == "linear":
        return f"{spec['a']:g} + {spec['b']:g}·X"
    if kind == "proportional":
        return f"{spec['b']:g}·X"
    return str(kind)


def reference_methods(session: Session, actor: Actor) -> list[dict]:
    """Reference methods with precision (r, R at level X), cost and turnaround, by property."""
    authorize(actor, Action.VIEW)
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    rows = [{"property": props.get(m.property_id, ""), "code": m.code, "name": m.name,
             "r": _precision_text(m.repeatability), "R": _precision_text(m.reproducibility),
             "cost": m.cost, "currency": m.currency, "turnaround_days": m.turnaround_days,
             "active": bool(m.active)}
            for m in session.exec(select(ReferenceMethod)).all()]
    return sorted(rows, key=lambda r: (r["property"], r["code"]))


def recent_predictions(session: Session, actor: Actor, *, limit: int = 50) -> list[dict]:
    """The newest predictions (newest first) with their value, model and flags."""
    authorize(actor, Action.VIEW)
    if isinstance(limit, bool) or not isinstance(limit, int) or limit < 1:
        raise InputError(f"limit must be a whole number ≥ 1, got {limit!r}", field="limit")
    preds = session.exec(select(Prediction).order_by(Prediction.predicted_at.desc(),
                                                     Prediction.id.desc()).limit(limit)).all()
    if not preds:
        return []
    models = {m.id: m for m in session.exec(select(ModelVersion).where(
        ModelVersion.id.in_({p.model_version_id for p in preds}))).all()}
    props = {p.id: p for p in session.exec(select(Property)).all()}
    serials = {i.id: i.serial for i in session.exec(select(Instrument)).all()}
    users = {u.id: u.name for u in session.exec(select(User)).all()}
    spectra = {sp_id: ext for sp_id, ext in session.exec(
        select(Spectrum.id, Sample.external_id).join(Sample, Sample.id == Spectrum.sample_id)
        .where(Spectrum.id.in_({p.spectrum_id for p in preds}))).all()}
    out = []
    for p in preds:
        mv = models[p.model_version_id]
        prop = props[mv.property_id]
        out.append({"id": p.id, "predicted_at": as_utc(p.predicted_at), "sample": spectra.get(p.spectrum_id),
                    "spectrum_id": p.spectrum_id, "property": prop.code, "unit": prop.unit,
                    "value": p.value, "model": mv.label, "instrument": serials.get(p.instrument_id),
                    "by": users.get(p.user_id), "flags": list(p.flags or [])})
    return out


def qc_charts_available(session: Session, actor: Actor) -> list[dict]:
    """Every (instrument, material, property, model version) with QC results, and how many:
    one chart each, as :func:`registry.services.qc.qc_chart` draws it."""
    authorize(actor, Action.VIEW)
    serials = {i.id: i.serial for i in session.exec(select(Instrument)).all()}
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    labels = {m_id: label for m_id, label in session.exec(select(ModelVersion.id, ModelVersion.label))}
    counts: dict[tuple[int, str, int, int], int] = {}
    for key in session.exec(select(QCResult.instrument_id, QCResult.material, QCResult.property_id,
                                   QCResult.model_version_id)).all():
        counts[tuple(key)] = counts.get(tuple(key), 0) + 1
    # newest model version first within each instrument, material and property
    keyed = sorted(counts.items(), key=lambda kv: (serials[kv[0][0]], kv[0][1], props[kv[0][2]],
                                                   -kv[0][3]))
    return [{"instrument": serials[i], "material": m, "property": props[p], "model": labels[v],
             "n": n} for (i, m, p, v), n in keyed]


# --------------------------------------------------------------------------- coverage

def _model_for(session: Session, prop: Property, grade: Grade, label: str | None) -> ModelVersion:
    """The named version, else the active one, else the newest approved or validated one."""
    if label:
        mv = get_model(session, label)
        if mv.property_id != prop.id or mv.grade_id != grade.id:
            raise InputError(f"model {mv.label} is not a {prop.code} model for grade {grade.code}",
                             field="model")
        return mv
    mv = current_model(session, prop, grade)
    if mv is not None:
        return mv
    raise NotFoundError(f"no active, approved or validated {prop.code} model for grade {grade.code}")


def _week_start(t: datetime) -> datetime:
    t = as_utc(t)
    return (t - timedelta(days=t.weekday())).replace(hour=0, minute=0, second=0, microsecond=0)


def recent_production(session: Session, mv: ModelVersion, trained, grade: Grade,
                      days: int) -> dict[str, Any]:
    """The grade's spectra of the ``days`` before its newest spectrum, the model's
    calibration spectra excluded (at most :data:`MAX_RECENT`, newest kept), oldest first,
    with the model's prediction-time diagnostics. One definition of "recent production"
    for the coverage map and the selection benefit, so both count the same spectra.

    Returns ``rows`` ((spectrum id, acquired UTC, sample), ...), ``since``, ``until``,
    ``X`` (raw spectra on the model axis), ``X_pre`` (the same through the model's
    recipe), ``diagnostics`` (None without rows) and ``outside`` (bool per row: a space
    check failed, :data:`SPACE_FLAGS`).
    """
    cs_ids = {int(s) for m in session.exec(select(CalibrationMember).where(
        CalibrationMember.set_id == mv.calibration_set_id, CalibrationMember.role == "cal")).all()
        for s in m.spectrum_ids}
    grade_rows = session.exec(select(Spectrum.id, Spectrum.acquired_at, Sample.external_id)
                              .join(Sample, Sample.id == Spectrum.sample_id)
                              .where(Sample.grade_id == grade.id)
                              .order_by(Spectrum.acquired_at.desc(), Spectrum.id.desc())).all()
    until = as_utc(grade_rows[0][1]) if grade_rows else None
    since = until - timedelta(days=days) if until else None
    rows = [(sid, as_utc(t), ext) for sid, t, ext in grade_rows
            if sid not in cs_ids and as_utc(t) >= since][:MAX_RECENT]
    rows.reverse()  # oldest first, for time plots
    X, X_pre, diag, outside = None, None, None, np.zeros(0, dtype=bool)
    if rows:
        X = load_on_axis(session, [r[0] for r in rows], trained.axis)
        X_pre = trained.preprocessor.transform(X)
        _, diag = trained.predict_preprocessed(X_pre)
        outside = np.array([any(f in SPACE_FLAGS for f in fl) for fl in diag.flag_lists()],
                           dtype=bool)
    return {"rows": rows, "since": since, "until": until, "X": X, "X_pre": X_pre,
            "diagnostics": diag, "outside": outside}


def coverage_map(session: Session, actor: Actor, property_code: str, grade_code: str, *,
                 days: int = 90, model: str | None = None) -> dict[str, Any]:
    """Where recent production lies relative to a model's calibration space.

    The model is ``model`` or the current one of the property and grade (active,
    else the newest approved or validated). Its calibration spectra are
    preprocessed by the model's own recipe and a PCA (two components) is fitted
    on them; the grade's other spectra acquired in the ``days`` before the newest
    spectrum of the grade (anchored on the data, as the selection benefit
    figures are, so the map does not empty when no spectra arrived lately) are
    projected into it and judged by the model's prediction-time checks
    (leverage, Hotelling T², Q residual, nearest neighbour; ASTM E1655 practice, from memory).

    Returns
    -------
    dict
        ``model, property, grade, since, until, days, explained_variance`` (2),
        ``calibration`` (``scores`` (n, 2), ``samples``), ``recent``
        (``scores`` (m, 2), ``samples``, ``spectrum_ids``, ``acquired_at``,
        ``outside`` bool (m,), ``flags``), ``counts`` (``calibration, recent,
        outside, share_outside``), ``checks`` (per check: ``check, words, limit,
        failed, makes_outside``; see :func:`_check_counts`) and ``weekly`` (``week_start,
        n, outside, share``) rows, one per week of the window, ``share`` None for a
        week without spectra.
    """
    authorize(actor, Action.VIEW)
    _check_days(days)
    prop = get_property(session, property_code)
    grade = get_grade(session, grade_code)
    mv = _model_for(session, prop, grade, model)
    trained = load_trained(mv)
    # Members in the order the model was fitted on (calibration_data's), so the
    # calibration's T² and Q stored in the model line up with the sample labels.
    members = members_of(session, session.get(CalibrationSet, mv.calibration_set_id), "cal")
    cal_ids = [int(s) for m in members for s in m.spectrum_ids]
    cal_samples = dict(session.exec(select(Sample.id, Sample.external_id).where(
        Sample.id.in_({m.sample_id for m in members}))).all())
    cal_labels = [cal_samples[m.sample_id] for m in members for _ in m.spectrum_ids]
    X_cal = trained.preprocessor.transform(load_on_axis(session, cal_ids, trained.axis))
    if X_cal.shape[0] < 3:
        raise InputError(f"model {mv.label} has {X_cal.shape[0]} calibration spectra; a map needs 3",
                         field="model")
    pca = PCA(n_components=2).fit(X_cal)

    rp = recent_production(session, mv, trained, grade, days)
    recent, since, until, diag = rp["rows"], rp["since"], rp["until"], rp["diagnostics"]
    if recent:
        flags = diag.flag_lists()
        scores_new = pca.transform(rp["X_pre"])
        t2_new, q_new = diag.t2, diag.q
    else:
        flags, scores_new = [], np.empty((0, 2))
        t2_new, q_new = np.empty(0), np.empty(0)
    # Hotelling T² and Q residual of every spectrum against the model's own limits: the
    # view in which a new blend component shows (high Q) even when PC1/PC2 look familiar.
    # The calibration's own values were stored with the model when it was fitted.
    domain = trained.domain
    outside = rp["outside"]
    return {
        "model": mv.label, "model_state": mv.state, "property": prop.code, "unit": prop.unit,
        "grade": grade.code, "days": days, "since": since, "until": until,
        "explained_variance": pca.explained_variance_ratio_.copy(),
        "calibration": {"scores": pca.transform(X_cal), "samples": cal_labels},
        "recent": {"scores": scores_new, "samples": [r[2] for r in recent],
                   "spectrum_ids": [r[0] for r in recent], "acquired_at": [r[1] for r in recent],
                   "outside": outside, "flags": flags},
        "residuals": {"t2_limit": float(domain.t2_limit_), "q_limit": float(domain.q_limit_),
                      "calibration": {"t2": np.array(domain.calibration_t2_, float),
                                      "q": np.array(domain.calibration_q_, float)},
                      "recent": {"t2": np.asarray(t2_new, float), "q": np.asarray(q_new, float)}},
        "counts": {"calibration": int(X_cal.shape[0]), "recent": len(recent),
                   "outside": int(outside.sum()),
                   "share_outside": float(outside.mean()) if len(recent) else None},
        "checks": _check_counts(diag, flags),
        "weekly": _weekly(recent, outside, since, until),
    }


def _check_days(days) -> None:
    if isinstance(days, bool) or not isinstance(days, int) or days < 1:
        raise InputError(f"days must be a whole number ≥ 1, got {days!r}", field="days")


def _check_counts(diag, flags: list[list[str]]) -> list[dict[str, Any]]:
    """Per prediction-time check: its words, limit, how many recent spectra fail it, and
    whether failing it puts a spectrum outside the calibration space (the prediction range
    check does not: a value beyond the calibrated range is flagged but the spectrum itself
    may be familiar)."""
    out = []
    for name in FLAG_NAMES:
        words, _, limit_key = CHECK_WORDS[name]
        limit = None
        if diag is not None:
            limit = ([diag.y_min, diag.y_max] if limit_key is None
                     else float(getattr(diag, limit_key)))
        out.append({"check": name, "words": words, "limit": limit,
                    "failed": sum(1 for f in flags if name in f),
                    "makes_outside": name in SPACE_FLAGS})
    return out


def _weekly(recent, outside, since: datetime | None, until: datetime | None) -> list[dict]:
    """One row per week (Monday 00:00 UTC) of the window, weeks without spectra included
    with ``n`` 0 and ``share`` None, so a week with no data is not read as 0 % outside."""
    if since is None:
        return []
    weeks: dict[datetime, list[int]] = {}
    w = _week_start(since)
    while w <= until:
        weeks[w] = [0, 0]
        w += timedelta(days=7)
    for (_, t, _), out in zip(recent, outside):
        counts = weeks.setdefault(_week_start(t), [0, 0])
        counts[0] += 1
        counts[1] += int(out)
    return [{"week_start": w, "n": n, "outside": k, "share": k / n if n else None}
            for w, (n, k) in sorted(weeks.items())]


def coverage_stamp(session: Session, actor: Actor, property_code: str, grade_code: str, *,
                   days: int = 90, model: str | None = None) -> tuple:
    """What :func:`coverage_map` depends on, cheaply: the model version it would use (label,
    state) and the grade's newest spectrum (spectra are only ever added). Equal stamps give
    equal maps, so a page may keep a map until the stamp changes."""
    authorize(actor, Action.VIEW)
    _check_days(days)
    prop = get_property(session, property_code)
    grade = get_grade(session, grade_code)
    mv = _model_for(session, prop, grade, model)
    newest = session.exec(select(func.max(Spectrum.id)).join(Sample, Sample.id == Spectrum.sample_id)
                          .where(Sample.grade_id == grade.id)).one()
    return (mv.label, str(mv.state), newest, days)


# --------------------------------------------------------------------------- trace

def trace_documents(session: Session, actor: Actor, prediction_id: int | None = None, *,
                    model: str | None = None, sample: str | None = None,
                    property_code: str | None = None) -> dict[str, Any]:
    """The trace of a prediction, a model version, or a sample and property, as a document,
    plain text and a self-contained HTML page.

    Tracing needs the ``trace`` permission as well (checked by the audit service).
    """
    authorize(actor, Action.VIEW)
    from ..lineage.trace_render import render
    from .audit import trace

    doc = trace(session, actor, prediction_id=None if prediction_id is None else int(prediction_id),
                model=model, sample=sample, property_code=property_code)
    return {"document": doc, "text": render(doc, "text"), "json": render(doc, "json"),
            "html": render(doc, "html")}


def latest_prediction_id(session: Session, actor: Actor) -> int | None:
    """The newest prediction's id (a sensible default for the trace page)."""
    authorize(actor, Action.VIEW)
    return session.exec(select(Prediction.id).order_by(Prediction.id.desc()).limit(1)).first()


# --------------------------------------------------------------------------- spectra

def spectra_preview(session: Session, actor: Actor, spectrum_ids: list[int], *,
                    limit: int = 30) -> dict[str, Any]:
    """The first ``limit`` of the given spectra, each on its own axis, for a plot.

    Returns ``{"total": n, "unit": "1/CM", "spectra": [{"id", "sample", "instrument",
    "x" (ascending wavenumbers), "y"}]}``.
    """
    authorize(actor, Action.VIEW)
    if isinstance(limit, bool) or not isinstance(limit, int) or limit < 1:
        raise InputError(f"limit must be a whole number ≥ 1, got {limit!r}", field="limit")
    ids = [int(i) for i in spectrum_ids][:limit]
    about = {sid: (axis_id, ext, serial) for sid, axis_id, ext, serial in session.exec(
        select(Spectrum.id, Spectrum.axis_id, Sample.external_id, Instrument.serial)
        .join(Sample, Sample.id == Spectrum.sample_id)
        .join(Instrument, Instrument.id == Spectrum.instrument_id)
        .where(Spectrum.id.in_(ids))).all()} if ids else {}
    missing = [i for i in ids if i not in about]
    if missing:
        raise NotFoundError(f"no spectrum {missing[0]}")
    curves: dict[int, dict] = {}
    for axis_id in sorted({a for a, _, _ in about.values()}):
        group = [i for i in ids if about[i][0] == axis_id]  # load_matrix wants one axis
        X, axis_row = load_matrix(session, group)
        x = axis_values(axis_row)
        for sid, y in zip(group, X):
            curves[sid] = {"id": sid, "sample": about[sid][1], "instrument": about[sid][2],
                           "x": x, "y": np.asarray(y, dtype=float)}
    return {"total": len(spectrum_ids), "unit": "1/CM", "spectra": [curves[i] for i in ids]}
