"""Revalidation: what is due when, the policies that say so, and triggers raised by hand.

A version in service (approved or active) is due ``interval_days`` after its
last passing validation (per property and grade policy, default 365 days),
or at once while a trigger is open: a QC signal, coverage drift, an
instrument service event, or a change of the reference method
(:func:`edit_method` raises that one).

Times are computed and stored in UTC; :func:`due_list` also gives each due
time in the zone of every site where the version is deployed.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta
from typing import Any

from sqlmodel import Session, select

from ..catalog import precision_at, validate_precision_spec
from ..errors import InputError, NotFoundError, StateError
from ..lifecycle.permissions import Action
from ..lifecycle.revalidation_rules import TriggerKind, to_site_time
from ..lifecycle.states import IN_SERVICE_STATES, DeploymentState
from ..storage.models import (Deployment, Grade, Instrument, ModelVersion, Property,
                              ReferenceMethod, RevalidationPolicy, RevalidationTrigger, Site)
from ..storage.revalidation_store import due_status_of, policy_for
from ..storage.types import as_utc, utcnow
from .admin import get_grade, get_property
from .context import Actor, audit, authorize
from .models import get_model

_DAY = timedelta(days=1)


# --------------------------------------------------------------------------- due list

def _deployment_sites(session: Session, mv: ModelVersion) -> list[Site]:
    """Sites of the instruments the version is active on (in site-name order)."""
    inst_ids = session.exec(select(Deployment.instrument_id).where(
        Deployment.model_version_id == mv.id, Deployment.state == DeploymentState.ACTIVE)).all()
    site_ids = {session.get(Instrument, i).site_id for i in inst_ids}
    return sorted((session.get(Site, s) for s in site_ids), key=lambda s: s.name)


def due_list(session: Session, actor: Actor, within_days: int | None = None,
             now: datetime | None = None) -> list[dict]:
    """Approved and active versions by revalidation due date, overdue first.

    Parameters
    ----------
    within_days : int, optional
        Only versions due within this many days (overdue ones always included).
    now : datetime, optional
        The instant to judge at (timezone-aware; default the current time).

    Returns
    -------
    list of dict
        ``label, property, grade, state, due_at`` (UTC), ``due_at_local``
        (one entry per deployment site: site, time zone, local time),
        ``days_left, overdue, reasons, last_validated_at, interval_days``,
        ``scheduled_at`` (the scheduled date alone, triggers aside), ``overdue_since``
        (when it became due: the passed scheduled date or the earliest open trigger;
        None unless overdue) and ``overdue_days`` (days since then, fractional; None
        unless overdue).
    """
    authorize(actor, Action.VIEW)
    if within_days is not None and (isinstance(within_days, bool) or int(within_days) != within_days
                                    or within_days < 0):
        raise InputError(f"the look-ahead must be a whole number of days ≥ 0, got {within_days!r}",
                         field="--within")
    now = as_utc(now) if now is not None else utcnow()
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    rows = []
    for mv in session.exec(select(ModelVersion).where(ModelVersion.state.in_(IN_SERVICE_STATES))
                           .order_by(ModelVersion.id)).all():
        status = due_status_of(session, mv, now)
        if status is None:
            continue
        if within_days is not None and not status.overdue and status.days_left > within_days:
            continue
        local = [{"site": site.name, "timezone": site.timezone,
                  "due_at_local": to_site_time(status.due_at, site.timezone)}
                 for site in _deployment_sites(session, mv)]
        rows.append({"label": mv.label, "property": props.get(mv.property_id),
                     "grade": grades.get(mv.grade_id), "state": mv.state,
                     "due_at": status.due_at, "due_at_local": local,
                     "days_left": status.days_left, "overdue": status.overdue,
                     "reasons": list(status.reasons), "last_validated_at": mv.last_validated_at,
                     "interval_days": policy_for(session, mv).interval_days,
                     "scheduled_at": status.scheduled_at, "overdue_since": status.overdue_since,
                     "overdue_days": ((now - status.overdue_since) / _DAY
                                      if status.overdue_since is not None else None)})
    rows.sort(key=lambda r: (not r["overdue"], r["due_at"], r["label"]))
    return rows


# --------------------------------------------------------------------------- policy

def _whole(value: Any, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        what = name.lstrip("-").replace("-", " ")  # an option name, said in words
        raise InputError(f"{what} must be a whole number ≥ {minimum}, got {value!r}", field=name)
    return value


def set_policy(session: Session, actor: Actor, property: str, grade: str | None,
               interval_days: int | None = None, *, coverage_window_days: int | None = None,
               coverage_threshold: float | None = None,
               coverage_min_count: int | None = None) -> RevalidationPolicy:
    """Create or change the revalidation policy of a property (and grade, or all grades)."""
    authorize(actor, Action.POLICY_EDIT)
    prop = get_property(session, property)
    grade_row = get_grade(session, grade) if grade else None
    changes: dict[str, Any] = {}
    if interval_days is not None:
        changes["interval_days"] = _whole(interval_days, "--interval-days", 1)
    if coverage_window_days is not None:
        changes["coverage_window_days"] = _whole(coverage_window_days, "--coverage-window-days", 1)
    if coverage_min_count is not None:
        changes["coverage_min_count"] = _whole(coverage_min_count, "--coverage-min-count", 1)
    if coverage_threshold is not None:
        t = float(coverage_threshold)
        if not (math.isfinite(t) and 0.0 <= t < 1.0):
            raise InputError(f"coverage threshold must be in [0, 1), got {coverage_threshold!r}",
                             field="--coverage-threshold")
        changes["coverage_threshold"] = t
    if not changes:
        raise InputError("nothing to change: give an interval or a coverage setting",
                         field="--interval-days")
    row = session.exec(select(RevalidationPolicy).where(
        RevalidationPolicy.property_id == prop.id,
        RevalidationPolicy.grade_id == (grade_row.id if grade_row else None))).first()
    before = None
    if row is None:
        row = RevalidationPolicy(property_id=prop.id, grade_id=grade_row.id if grade_row else None)
    else:
        before = {k: getattr(row, k) for k in changes}
    for k, v in changes.items():
        setattr(row, k, v)
    session.add(row)
    session.flush()
    audit(session, actor, Action.POLICY_EDIT, entity_type="revalidation_policy", entity_id=row.id,
          data={"property": prop.code, "grade": grade_row.code if grade_row else None,
                "before": before, "after": changes})
    return row


def list_policies(session: Session, actor: Actor) -> list[dict]:
    authorize(actor, Action.VIEW)
    props = {p.id: p.code for p in session.exec(select(Property)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    return [{"property": props[p.property_id], "grade": grades.get(p.grade_id),
             "interval_days": p.interval_days, "coverage_window_days": p.coverage_window_days,
             "coverage_threshold": p.coverage_threshold, "coverage_min_count": p.coverage_min_count}
            for p in session.exec(select(RevalidationPolicy).order_by(RevalidationPolicy.id)).all()]


# --------------------------------------------------------------------------- triggers

def _as_kind(kind: str) -> TriggerKind:
    try:
        return TriggerKind(kind)
    except ValueError:
        raise InputError(f"unknown trigger kind {kind!r}; known: "
                         + ", ".join(k.value for k in TriggerKind), field="--kind") from None


def raise_trigger(session: Session, actor: Actor, label: str, kind: str,
                  detail: dict | str | None = None) -> RevalidationTrigger:
    """Make a version in service due for revalidation now, by hand, saying why."""
    authorize(actor, Action.TRIGGER_RAISE)
    kind = _as_kind(kind)
    mv = get_model(session, label)
    if mv.state not in IN_SERVICE_STATES:
        raise StateError(f"model {mv.label} is {mv.state}; revalidation triggers apply to approved "
                         "or active versions")
    if isinstance(detail, str):
        detail = {"note": detail} if detail.strip() else {}
    if detail is not None and not isinstance(detail, dict):
        raise InputError("trigger detail must be a text or a mapping", field="--detail")
    body = dict(detail or {})
    body.update({"raised_by": actor.name, "manual": True})
    trig = RevalidationTrigger(model_version_id=mv.id, kind=kind.value, detail=body)
    session.add(trig)
    session.flush()
    audit(session, actor, Action.TRIGGER_RAISE, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "trigger_id": trig.id, "kind": kind.value, "detail": body})
    return trig


def clear_trigger(session: Session, actor: Actor, trigger_id: int, reason: str) -> RevalidationTrigger:
    """Close an open trigger with a reason.

    A QC signal needs ``qc_clear_signal`` (a reviewer who found the cause);
    any other trigger may be withdrawn by whoever may raise one
    (``trigger_raise``). Passing revalidation closes non-QC triggers by itself.
    """
    trig = session.get(RevalidationTrigger, int(trigger_id))
    if trig is not None and trig.kind == "qc_signal":
        from .qc import clear_qc_signal

        return clear_qc_signal(session, actor, trig.id, reason)
    authorize(actor, Action.TRIGGER_RAISE)
    if trig is None:
        raise NotFoundError(f"unknown revalidation trigger {trigger_id}")
    mv, reason = close_trigger(session, actor, trig, reason, what="trigger")
    audit(session, actor, Action.TRIGGER_CLEAR, entity_type="model_version", entity_id=mv.id,
          data={"label": mv.label, "trigger_id": trig.id, "kind": trig.kind, "reason": reason})
    return trig


def close_trigger(session: Session, actor: Actor, trig: RevalidationTrigger, reason: str, *,
                  what: str) -> tuple[ModelVersion, str]:
    """Mark an open trigger cleared by ``actor`` with a reason (the caller audits it)."""
    if trig.cleared_at is not None:
        raise StateError(f"{what} {trig.id} was already cleared at "
                         f"{trig.cleared_at:%Y-%m-%d %H:%M} UTC")
    reason = (reason or "").strip()
    if not reason:
        raise InputError(f"clearing a {what} needs a reason", field="--reason")
    trig.cleared_at, trig.cleared_by_id, trig.clear_reason = utcnow(), actor.id, reason
    session.add(trig)
    session.flush()
    return session.get(ModelVersion, trig.model_version_id), reason


def list_triggers(session: Session, actor: Actor, *, label: str | None = None,
                  open_only: bool = True) -> list[dict]:
    authorize(actor, Action.VIEW)
    q = select(RevalidationTrigger)
    if label:
        q = q.where(RevalidationTrigger.model_version_id == get_model(session, label).id)
    if open_only:
        q = q.where(RevalidationTrigger.cleared_at == None)  # noqa: E711
    labels = {m.id: m.label for m in session.exec(select(ModelVersion)).all()}
    return [{"id": t.id, "model": labels.get(t.model_version_id), "kind": t.kind,
             "raised_at": t.raised_at, "cleared_at": t.cleared_at, "detail": t.detail,
             "clear_reason": t.clear_reason}
            for t in session.exec(q.order_by(RevalidationTrigger.id)).all()]


def raise_input_change_triggers(session: Session, mv: ModelVersion) -> list[list]:
    """``mv`` has just gone into service: every version in service on the same grade that
    combines results of ``mv``'s property (a derived property) is due for revalidation
    now, with its inputs as they are from now on. Returns ``[[label, trigger id], ...]``."""
    from ..chemometrics.fitted import load_fitted
    from ..errors import IntegrityError

    prop = session.get(Property, mv.property_id)
    raised = []
    for other in session.exec(select(ModelVersion).where(
            ModelVersion.state.in_(IN_SERVICE_STATES), ModelVersion.id != mv.id,
            ModelVersion.grade_id == mv.grade_id if mv.grade_id is not None
            else ModelVersion.grade_id.is_(None)).order_by(ModelVersion.id)).all():
        try:
            inputs = load_fitted(other.artifact, other.artifact_sha256).inputs
        except (IntegrityError, InputError):
            continue  # an artifact that does not verify is reported by trace and audit verify
        if prop.code not in inputs:
            continue
        trig = RevalidationTrigger(model_version_id=other.id, kind=TriggerKind.INPUT_CHANGE.value,
                                   detail={"property": prop.code, "model": mv.label})
        session.add(trig)
        session.flush()
        audit(session, None, Action.TRIGGER_RAISE, entity_type="model_version",
              entity_id=other.id, data={"label": other.label, "trigger_id": trig.id,
                                        "kind": trig.kind, "detail": trig.detail})
        raised.append([other.label, trig.id])
    return raised


# --------------------------------------------------------------------------- reference methods

#: Edits that change what a reference value means or how precise it is; these make
#: models of the property due (the other fields are planning data).
METHOD_CONTENT_FIELDS = ("name", "repeatability", "reproducibility")
METHOD_FIELDS = METHOD_CONTENT_FIELDS + ("cost", "currency", "turnaround_days", "source")


def _check_precision(spec: Any, field: str) -> dict:
    if isinstance(spec, (int, float)) and not isinstance(spec, bool):
        spec = {"kind": "constant", "value": float(spec)}
    if not isinstance(spec, dict):
        raise InputError(f"precision spec must be a number or a mapping, got {spec!r}", field=field)
    validate_precision_spec(spec, field)
    for level in (1.0, 100.0):
        v = precision_at(spec, level)
        if v is None or not math.isfinite(v) or v < 0:
            raise InputError(f"precision spec {spec!r} gives {v} at level {level:g}; "
                             "precision must be ≥ 0", field=field)
    return spec


def edit_method(session: Session, actor: Actor, code: str, property: str,
                **changes: Any) -> ReferenceMethod:
    """Change a reference method; a change of its name or precision raises
    ``method_change`` triggers on every approved or active model of the property."""
    authorize(actor, Action.METHOD_EDIT)
    prop = get_property(session, property)
    method = session.exec(select(ReferenceMethod).where(ReferenceMethod.code == code,
                                                        ReferenceMethod.property_id == prop.id)).first()
    if method is None:
        raise NotFoundError(f"no reference method {code!r} for {prop.code}")
    unknown = sorted(set(changes) - set(METHOD_FIELDS))
    if unknown:
        raise InputError(f"cannot edit {', '.join(unknown)}; editable: {', '.join(METHOD_FIELDS)}",
                         field=unknown[0])
    changes = {k: v for k, v in changes.items() if v is not None}
    if not changes:
        raise InputError("nothing to change", field="--cost")
    clean: dict[str, Any] = {}
    for k, v in changes.items():
        if k in ("repeatability", "reproducibility"):
            clean[k] = _check_precision(v, f"--{k}")
        elif k == "cost":
            cost = float(v)
            if not (math.isfinite(cost) and cost >= 0):
                raise InputError(f"cost must be ≥ 0, got {v!r}", field="--cost")
            clean[k] = cost
        elif k == "turnaround_days":
            clean[k] = _whole(v, "--turnaround-days", 0)
        else:
            clean[k] = str(v)
    before = {k: getattr(method, k) for k in clean}
    changed = {k: v for k, v in clean.items() if before[k] != v}
    for k, v in changed.items():
        setattr(method, k, v)
    session.add(method)
    session.flush()
    triggers = []
    if any(k in METHOD_CONTENT_FIELDS for k in changed):
        for mv in session.exec(select(ModelVersion).where(
                ModelVersion.property_id == prop.id, ModelVersion.state.in_(IN_SERVICE_STATES))
                .order_by(ModelVersion.id)).all():
            trig = RevalidationTrigger(model_version_id=mv.id, kind=TriggerKind.METHOD_CHANGE.value,
                                       detail={"method": method.code, "property": prop.code,
                                               "changed": sorted(k for k in changed
                                                                 if k in METHOD_CONTENT_FIELDS)})
            session.add(trig)
            session.flush()
            triggers.append([mv.label, trig.id])
    audit(session, actor, Action.METHOD_EDIT, entity_type="reference_method", entity_id=method.id,
          data={"code": method.code, "property": prop.code,
                "before": {k: before[k] for k in changed}, "after": changed,
                "triggers": triggers})
    return method
