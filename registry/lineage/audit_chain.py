"""The append-only audit trail as a hash chain (verified by :mod:`registry.lineage.verify`).

Each event stores the canonical JSON of its payload, which itself contains the
sequence number, time, user, action and entity, so that reordering or editing
any event breaks the chain: ``hash = SHA-256(prev_hash + payload)``. The first
event's ``prev_hash`` is 64 zeros.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Iterable

from sqlalchemy import text
from sqlmodel import Session, select

from ..lifecycle.permissions import Action
from ..storage.models import AuditEvent
from ..storage.types import utcnow
from .canonical import canonical_json, sha256_hex

GENESIS = "0" * 64
_PG_LOCK_KEY = 0x5BEC1ED6  # advisory lock serialising appends on PostgreSQL


def link_hash(prev_hash: str, payload_text: str) -> str:
    return sha256_hex(prev_hash + payload_text)


def append_event(session: Session, *, user_id: int | None, user_name: str, action: Action,
                 entity_type: str = "", entity_id: int | None = None,
                 data: dict[str, Any] | None = None, at: datetime | None = None) -> AuditEvent:
    """Append one event in the caller's transaction and return it (flushed).

    ``action`` is an :class:`Action` member: the trail records no ad-hoc names.
    """
    if not isinstance(action, Action):
        raise TypeError(f"audit action must be an Action member, got {action!r}")
    bind = session.get_bind()
    if bind.dialect.name == "postgresql":
        session.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _PG_LOCK_KEY})
    session.flush()
    last = session.exec(select(AuditEvent).order_by(AuditEvent.id.desc()).limit(1)).first()
    seq = (last.id if last else 0) + 1
    prev = last.hash if last else GENESIS
    at = at or utcnow()
    payload = {
        "seq": seq, "at": at, "user": user_name, "action": action,
        "entity_type": entity_type, "entity_id": entity_id, "data": data or {},
    }
    payload_text = canonical_json(payload)
    event = AuditEvent(id=seq, occurred_at=at, user_id=user_id, user_name=user_name,
                       action=action, entity_type=entity_type, entity_id=entity_id,
                       payload=payload_text, prev_hash=prev, hash=link_hash(prev, payload_text))
    session.add(event)
    session.flush()
    return event


def iter_events(session: Session, batch: int = 5000) -> Iterable[AuditEvent]:
    last_id = 0
    while True:
        rows = session.exec(select(AuditEvent).where(AuditEvent.id > last_id)
                            .order_by(AuditEvent.id).limit(batch)).all()
        if not rows:
            return
        yield from rows
        last_id = rows[-1].id


def chain_head(session: Session) -> str:
    last = session.exec(select(AuditEvent).order_by(AuditEvent.id.desc()).limit(1)).first()
    return last.hash if last else GENESIS

