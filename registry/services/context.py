"""What every service function shares: the acting user, permission checks, the audit entry.

A service function takes ``(session, actor, ...)``, calls :func:`authorize`
first, does its work with ``session.flush()`` only, and calls :func:`audit`
last. The caller owns the transaction (``session_scope``), so a failure
anywhere leaves the database unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlmodel import Session

from ..errors import PermissionDenied
from ..lifecycle.permissions import Action, require
from ..lineage.audit_chain import append_event
from ..storage.models import AuditEvent


@dataclass(frozen=True)
class Actor:
    """An authenticated user acting on the registry."""

    id: int
    name: str
    roles: frozenset[str]

    def has(self, role: str) -> bool:
        return role in self.roles


def authorize(actor: Actor | None, action: Action) -> Actor:
    """Refuse unless ``actor`` holds a role allowed to perform ``action``."""
    if actor is None:
        raise PermissionDenied(f"{action.value} needs a signed-in user")
    require(actor.roles, action, user=actor.name)
    return actor


def audit(session: Session, actor: Actor | None, action: Action, *,
          entity_type: str = "", entity_id: int | None = None,
          data: dict[str, Any] | None = None,
          hashes: dict[str, list] | None = None) -> AuditEvent:
    """Append the audit event for this action inside the caller's transaction.

    ``hashes`` maps an entity kind (``spectrum``, ``reference_result``,
    ``calibration_set``, ``model_version``, ``validation_record``, ``signature``)
    to ``[[id, sha256], ...]``: the content hashes this event vouches for.
    ``audit verify`` recomputes each entity's hash and compares it with the
    latest one vouched for in the chain.
    """
    data = dict(data or {})
    if hashes:
        data["hashes"] = {k: [[int(i), h] for i, h in v] for k, v in hashes.items()}
    return append_event(
        session, user_id=actor.id if actor else None, user_name=actor.name if actor else "system",
        action=action, entity_type=entity_type, entity_id=entity_id, data=data)
