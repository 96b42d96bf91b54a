"""Auditor actions: verify the audit trail and the content it vouches for; trace a result.

Both only read: nothing is written, so nothing is audited (an auditor changes nothing).
"""

from __future__ import annotations

from datetime import datetime

from sqlmodel import Session

from ..lifecycle.permissions import Action
from ..lineage.trace import build_trace
from ..lineage.verify import VerifyReport
from ..lineage.verify import verify_registry as _verify
from .context import Actor, authorize


def verify_registry(session: Session, actor: Actor) -> VerifyReport:
    """Recompute the hash chain and every content hash; see :mod:`registry.lineage.verify`."""
    authorize(actor, Action.AUDIT_VERIFY)
    return _verify(session)


def trace(session: Session, actor: Actor, *, prediction_id: int | None = None,
          sample: str | None = None, property_code: str | None = None,
          model: str | None = None, now: datetime | None = None) -> dict:
    """The trace document (schema ``specledger-trace`` v1) of one prediction, sample or model."""
    authorize(actor, Action.TRACE)
    return build_trace(session, prediction_id=prediction_id, sample=sample,
                       property_code=property_code, model=model, now=now)
