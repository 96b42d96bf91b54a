"""Revalidation status of model versions: policy, due date, open triggers."""

from __future__ import annotations

from datetime import datetime

from sqlmodel import Session, select

from ..lifecycle.revalidation import DueStatus, Trigger, due_date, due_status
from ..storage.models import ModelVersion, RevalidationPolicy, RevalidationTrigger
from ..storage.types import utcnow

DEFAULT_INTERVAL_DAYS = 365  # common practice: yearly revalidation unless the lab's policy says otherwise


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
    bits = [f"{k}={v}" for k, v in d.items() if k in ("instrument", "rule", "share", "kind", "method")]
    return f"raised {t.raised_at:%Y-%m-%d}" + (f"; {', '.join(bits)}" if bits else "")


def model_due_status(session: Session, mv: ModelVersion, now: datetime | None = None) -> DueStatus | None:
    """Due status of an approved or active version (None for versions not in service)."""
    if mv.state not in ("approved", "active") or mv.last_validated_at is None:
        return None
    now = now or utcnow()
    policy = policy_for(session, mv)
    scheduled = due_date(mv.last_validated_at, policy.interval_days)
    triggers = [Trigger(t.kind, _describe(t)) for t in open_triggers(session, mv)]
    return due_status(now, scheduled, triggers)
