"""Reactions of the lifecycle to events elsewhere (kept apart to avoid import cycles)."""

from __future__ import annotations

from sqlmodel import Session, select

from ..storage.models import Deployment, Instrument, InstrumentEvent, RevalidationTrigger


def on_instrument_event(session: Session, instrument: Instrument, event: InstrumentEvent) -> None:
    """A serviced instrument makes every model active on it due for revalidation now."""
    if event.kind not in ("service", "repair", "relocation"):
        return
    deps = session.exec(select(Deployment).where(Deployment.instrument_id == instrument.id,
                                                 Deployment.state == "active")).all()
    for dep in deps:
        already = session.exec(select(RevalidationTrigger.id).where(
            RevalidationTrigger.model_version_id == dep.model_version_id,
            RevalidationTrigger.kind == "instrument_service",
            RevalidationTrigger.cleared_at == None)).first()  # noqa: E711
        if already is not None:
            continue  # one open service trigger per model is enough to make it due
        session.add(RevalidationTrigger(
            model_version_id=dep.model_version_id, kind="instrument_service",
            detail={"instrument": instrument.serial, "event_id": event.id, "kind": event.kind}))
    session.flush()


def clear_triggers_after_revalidation(session: Session, mv, actor, record) -> int:
    """A passing revalidation answers the open triggers (except QC signals, which a
    reviewer clears explicitly once the cause is found)."""
    from ..storage.types import utcnow

    n = 0
    for t in session.exec(select(RevalidationTrigger).where(
            RevalidationTrigger.model_version_id == mv.id,
            RevalidationTrigger.cleared_at == None)).all():  # noqa: E711
        if t.kind == "qc_signal":
            continue
        t.cleared_at = utcnow()
        t.cleared_by_id = actor.id
        t.clear_reason = f"answered by passing validation record {record.id}"
        session.add(t)
        n += 1
    session.flush()
    return n
