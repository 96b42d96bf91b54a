"""Revalidation rows: the policy that applies to a version, its open triggers, and the
triggers the registry raises or clears by itself.

The rules (due dates, which events and results raise or answer a trigger) are in
:mod:`registry.lifecycle.revalidation_rules`; this module only reads and writes
the rows they need. The user actions are in :mod:`registry.services.revalidation`.
"""

from __future__ import annotations

from datetime import datetime

from sqlmodel import Session, select

from ..lifecycle.revalidation_rules import (DEFAULT_INTERVAL_DAYS, SERVICE_EVENT_KINDS, DueStatus,
                                            Trigger, TriggerKind, cleared_by_revalidation,
                                            model_due_status)
from ..lifecycle.states import DeploymentState
from .models import (Deployment, Instrument, InstrumentEvent, ModelVersion, RevalidationPolicy,
                     RevalidationTrigger)
from .types import as_utc, utcnow


def policy_for(session: Session, mv: ModelVersion) -> RevalidationPolicy:
    """The policy for the model's property and grade, else the property's, else the default."""
    for grade_id in (mv.grade_id, None):
        row = session.exec(select(RevalidationPolicy).where(
            RevalidationPolicy.property_id == mv.property_id,
            RevalidationPolicy.grade_id == grade_id)).first()
        if row is not None:
            return row
    return RevalidationPolicy(property_id=mv.property_id, grade_id=mv.grade_id,
                              interval_days=DEFAULT_INTERVAL_DAYS)


def open_triggers(session: Session, mv: ModelVersion) -> list[RevalidationTrigger]:
    return list(session.exec(select(RevalidationTrigger).where(
        RevalidationTrigger.model_version_id == mv.id,
        RevalidationTrigger.cleared_at == None)  # noqa: E711
        .order_by(RevalidationTrigger.id)).all())


def _describe(t: RevalidationTrigger) -> str:
    d = t.detail or {}
    bits = [f"{k}={v}" for k, v in d.items() if k in ("instrument", "rule", "share", "kind", "method",
                                                 "property", "model")]
    return f"raised {t.raised_at:%Y-%m-%d}" + (f"; {', '.join(bits)}" if bits else "")


def due_status_of(session: Session, mv: ModelVersion, now: datetime | None = None) -> DueStatus | None:
    """:func:`~registry.lifecycle.revalidation_rules.model_due_status` of a stored version
    (None for versions not in service)."""
    triggers = [Trigger(t.kind, _describe(t), as_utc(t.raised_at))
                for t in open_triggers(session, mv)]
    return model_due_status(mv.state, mv.last_validated_at, policy_for(session, mv).interval_days,
                            triggers, now or utcnow())


def raise_service_triggers(session: Session, instrument: Instrument, event: InstrumentEvent) -> None:
    """A serviced instrument makes every model active on it due for revalidation now."""
    if event.kind not in SERVICE_EVENT_KINDS:
        return
    deps = session.exec(select(Deployment).where(
        Deployment.instrument_id == instrument.id,
        Deployment.state == DeploymentState.ACTIVE)).all()
    for dep in deps:
        already = session.exec(select(RevalidationTrigger.id).where(
            RevalidationTrigger.model_version_id == dep.model_version_id,
            RevalidationTrigger.kind == TriggerKind.INSTRUMENT_SERVICE,
            RevalidationTrigger.cleared_at == None)).first()  # noqa: E711
        if already is not None:
            continue  # one open service trigger per model is enough to make it due
        session.add(RevalidationTrigger(
            model_version_id=dep.model_version_id, kind=TriggerKind.INSTRUMENT_SERVICE.value,
            detail={"instrument": instrument.serial, "event_id": event.id, "kind": event.kind}))
    session.flush()


def clear_answered_triggers(session: Session, mv: ModelVersion, user_id: int,
                            record_id: int) -> int:
    """Clear the open triggers that passing validation record ``record_id`` answers;
    returns how many."""
    n = 0
    for t in open_triggers(session, mv):
        if not cleared_by_revalidation(t.kind):
            continue
        t.cleared_at = utcnow()
        t.cleared_by_id = user_id
        t.clear_reason = f"answered by passing validation record {record_id}"
        session.add(t)
        n += 1
    session.flush()
    return n
