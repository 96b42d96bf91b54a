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
        session.add(RevalidationTrigger(
            model_version_id=dep.model_version_id, kind="instrument_service",
            detail={"instrument": instrument.serial, "event_id": event.id, "kind": event.kind}))
    session.flush()
