"""QC results of models in use: add a result, chart it, clear a signal.

A QC result is a control material of known value measured on an instrument
and predicted by the model active there for the material's property. Results
are charted per (instrument, material, property, model version): activating a
new version starts a new chart, since its predictions are a new measurement
process.

Choices, and why:

* The chart plots the measured (predicted) values. Limits come from the first
  20 results (:data:`registry.lifecycle.qc_charts.DEFAULT_BASELINE`); the
  centre line is the baseline mean, so a constant bias against the known value
  does not signal by itself, but is reported with the chart (ASTM D6299
  treats the known value as a separate accuracy check).
* No signal is raised before :data:`MIN_RESULTS_FOR_SIGNALS` results: limits
  from a handful of points are meaningless (from memory: ASTM D6299 asks for
  about 15–20 results before control limits are set; 15 is used here).
* Only a signal *at the newly added point* counts: earlier points were judged
  when they were added.
* The known value of a material is given with its first result and reused
  after; giving a different one later is refused (a new lot of control
  material is a new material name).
* A signal raises one ``qc_signal`` revalidation trigger for the model on
  that instrument; while one is open, further signals are stored on their
  results but raise no second trigger. A reviewer clears it with a reason.
"""

from __future__ import annotations

import math
from datetime import datetime

from sqlmodel import Session, select

from ..errors import InputError, NotFoundError, StateError
from ..lifecycle.permissions import Action
from ..lifecycle.qc_charts import DEFAULT_BASELINE, qc_report
from ..storage.models import Instrument, ModelVersion, Property, QCResult, RevalidationTrigger, Site
from ..storage.types import as_utc, utcnow
from ..timeparse import parse_time
from .admin import get_grade, get_instrument, get_property
from .context import Actor, audit, authorize
from .lifecycle import active_model_on

MIN_RESULTS_FOR_SIGNALS = 15


def _material_property(session: Session, inst: Instrument, material: str,
                       property_code: str | None) -> Property:
    if property_code:
        return get_property(session, property_code)
    ids = set(session.exec(select(QCResult.property_id).where(
        QCResult.instrument_id == inst.id, QCResult.material == material)).all())
    if len(ids) == 1:
        return session.get(Property, ids.pop())
    if not ids:
        raise InputError(f"first QC result of {material!r} on {inst.serial}: give its property",
                         field="--property")
    raise InputError(f"material {material!r} on {inst.serial} is charted for several properties; "
                     "name the property", field="--property")


def _active_model(session: Session, inst: Instrument, prop: Property,
                  grade_code: str | None) -> ModelVersion:
    if grade_code:
        grade = get_grade(session, grade_code)
        found = active_model_on(session, inst.id, prop.id, grade.id)
    else:
        found = active_model_on(session, inst.id, prop.id, any_grade=True)
    if not found:
        raise StateError(f"no active model for {prop.code} on instrument {inst.serial}"
                         + (f" (grade {grade_code})" if grade_code else ""))
    if len(found) > 1:
        raise InputError(f"{len(found)} models for {prop.code} are active on {inst.serial} "
                         f"({', '.join(m.label for m in found)}); name the grade", field="--grade")
    return found[0]


def _chart_rows(session: Session, inst_id: int, material: str, prop_id: int,
                mv_id: int) -> list[QCResult]:
    return list(session.exec(select(QCResult).where(
        QCResult.instrument_id == inst_id, QCResult.material == material,
        QCResult.property_id == prop_id, QCResult.model_version_id == mv_id)
        .order_by(QCResult.measured_at, QCResult.id)).all())


def _report(values: list[float]):
    """The chart's report, or None while there are too few or too uniform results."""
    try:
        return qc_report(values, baseline=DEFAULT_BASELINE)
    except InputError:
        return None


def _finite(value: float, field: str) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{value!r} is not a number", field=field) from None
    if not math.isfinite(value):
        raise InputError(f"{value} is not a finite number", field=field)
    return value


def _measured_at(session: Session, inst: Instrument, measured_at: datetime | str | None) -> datetime:
    """UTC time of measurement; text without an offset is the instrument site's local time."""
    if measured_at is None:
        return utcnow()
    if isinstance(measured_at, str):
        site = session.get(Site, inst.site_id)
        return parse_time(measured_at, site.timezone, field="--at")
    if measured_at.tzinfo is None:
        raise InputError("measurement time has no time zone", field="--at")
    return as_utc(measured_at)


def add_qc_result(session: Session, actor: Actor, *, instrument: str, material: str,
                  value: float, known_value: float | None = None,
                  property_code: str | None = None, measured_at: datetime | str | None = None,
                  grade_code: str | None = None) -> QCResult:
    """Store one QC result, chart it, and raise a trigger if the new point signals.

    Returns the stored result; ``result.signals`` lists the rules the new point
    broke (empty when in control).
    """
    authorize(actor, Action.QC_ADD)
    material = (material or "").strip()
    if not material:
        raise InputError("a QC result needs the control material's name", field="--material")
    value = _finite(value, "--value")
    inst = get_instrument(session, instrument)
    prop = _material_property(session, inst, material, property_code)
    mv = _active_model(session, inst, prop, grade_code)
    earlier = session.exec(select(QCResult.known_value).where(
        QCResult.instrument_id == inst.id, QCResult.material == material,
        QCResult.property_id == prop.id, QCResult.known_value != None)  # noqa: E711
        .order_by(QCResult.id)).first()
    if earlier is None:
        if known_value is None:
            raise InputError(f"first QC result of {material!r} for {prop.code}: give its known "
                             "value", field="--known")
        known = _finite(known_value, "--known")
    else:
        if known_value is not None and not math.isclose(_finite(known_value, "--known"), earlier,
                                                         rel_tol=0, abs_tol=1e-12):
            raise InputError(f"material {material!r} has known value {earlier:g}; a control "
                             "material with another value needs its own name", field="--known")
        known = earlier
    when = _measured_at(session, inst, measured_at)
    result = QCResult(instrument_id=inst.id, model_version_id=mv.id, property_id=prop.id,
                      material=material, known_value=known, measured_value=value,
                      measured_at=when, user_id=actor.id, signals=[])
    session.add(result)
    session.flush()
    rows = _chart_rows(session, inst.id, material, prop.id, mv.id)
    new_signals = []
    if len(rows) >= MIN_RESULTS_FOR_SIGNALS:
        report = _report([r.measured_value for r in rows])
        position = next(i for i, r in enumerate(rows) if r.id == result.id)
        if report is not None:
            new_signals = [{"rule": s.rule.value, "message": s.message}
                           for s in report.signals if s.index == position]
    trigger = None
    if new_signals:
        result.signals = new_signals
        session.add(result)
        trigger = _raise_qc_trigger(session, mv, inst, material, result, new_signals)
    session.flush()
    audit(session, actor, Action.QC_ADD, entity_type="qc_result", entity_id=result.id,
          data={"instrument": inst.serial, "material": material, "property": prop.code,
                "model": mv.label, "known_value": known, "measured_value": value,
                "measured_at": when, "signals": [s["rule"] for s in new_signals],
                "trigger_id": trigger.id if trigger else None})
    return result


def _raise_qc_trigger(session: Session, mv: ModelVersion, inst: Instrument, material: str,
                      result: QCResult, signals: list[dict]) -> RevalidationTrigger | None:
    for t in session.exec(select(RevalidationTrigger).where(
            RevalidationTrigger.model_version_id == mv.id, RevalidationTrigger.kind == "qc_signal",
            RevalidationTrigger.cleared_at == None)).all():  # noqa: E711
        if (t.detail or {}).get("instrument") == inst.serial:
            return None
    trig = RevalidationTrigger(model_version_id=mv.id, kind="qc_signal",
                               detail={"instrument": inst.serial, "material": material,
                                       "rule": signals[0]["rule"],
                                       "rules": [s["rule"] for s in signals],
                                       "qc_result_id": result.id})
    session.add(trig)
    session.flush()
    return trig


def qc_chart(session: Session, actor: Actor, *, instrument: str, material: str,
             property_code: str | None = None, model: str | None = None) -> dict:
    """Plot data and signals of one chart (default: the model of the latest result)."""
    authorize(actor, Action.VIEW)
    inst = get_instrument(session, instrument)
    prop = _material_property(session, inst, material, property_code)
    q = select(QCResult).where(QCResult.instrument_id == inst.id, QCResult.material == material,
                               QCResult.property_id == prop.id)
    if model:
        from .models import get_model

        q = q.where(QCResult.model_version_id == get_model(session, model).id)
    latest = session.exec(q.order_by(QCResult.measured_at.desc(), QCResult.id.desc())).first()
    if latest is None:
        raise NotFoundError(f"no QC results of {material!r} for {prop.code} on {inst.serial}")
    mv = session.get(ModelVersion, latest.model_version_id)
    rows = _chart_rows(session, inst.id, material, prop.id, mv.id)
    values = [r.measured_value for r in rows]
    report = _report(values)
    known = rows[0].known_value
    doc = {"instrument": inst.serial, "material": material, "property": prop.code,
           "unit": prop.unit, "model": mv.label, "known_value": known, "n": len(rows),
           "result_ids": [r.id for r in rows], "measured_at": [r.measured_at for r in rows],
           "mean": sum(values) / len(values),
           "bias_vs_known": (sum(values) / len(values) - known) if known is not None else None,
           "min_results_for_signals": MIN_RESULTS_FOR_SIGNALS,
           "stored_signals": [{"result_id": r.id, "index": i, "rules": [s["rule"] for s in r.signals]}
                              for i, r in enumerate(rows) if r.signals],
           "open_triggers": [{"id": t.id, "raised_at": t.raised_at, "detail": t.detail}
                             for t in _open_qc_triggers(session, mv, inst)]}
    if report is None:
        doc.update({"chart": None, "signals": [],
                    "note": "too few or identical results to set control limits"})
    else:
        plot = report.plot_data()
        doc.update({"chart": plot, "signals": plot["signals"]})
    return doc


def _open_qc_triggers(session: Session, mv: ModelVersion, inst: Instrument) -> list[RevalidationTrigger]:
    return [t for t in session.exec(select(RevalidationTrigger).where(
        RevalidationTrigger.model_version_id == mv.id, RevalidationTrigger.kind == "qc_signal",
        RevalidationTrigger.cleared_at == None).order_by(RevalidationTrigger.id)).all()  # noqa: E711
        if (t.detail or {}).get("instrument") in (None, inst.serial)]


def clear_qc_signal(session: Session, actor: Actor, trigger_id: int, reason: str) -> RevalidationTrigger:
    """A reviewer closes an open QC-signal trigger once the cause is found (reason required)."""
    authorize(actor, Action.QC_CLEAR_SIGNAL)
    trig = session.get(RevalidationTrigger, int(trigger_id))
    if trig is None:
        raise NotFoundError(f"unknown revalidation trigger {trigger_id}")
    if trig.kind != "qc_signal":
        raise InputError(f"trigger {trig.id} is a {trig.kind} trigger, not a QC signal",
                         field="TRIGGER")
    from .revalidation import close_trigger

    mv, reason = close_trigger(session, actor, trig, reason, what="QC signal")
    audit(session, actor, Action.QC_CLEAR_SIGNAL, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "trigger_id": trig.id, "detail": trig.detail, "reason": reason})
    return trig
