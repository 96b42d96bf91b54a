"""Registry status: URL, schema revision, row counts."""

from __future__ import annotations

from sqlalchemy import func
from sqlmodel import Session, select

from ..storage.engine import current_revision, head_revision, mask_url
from ..storage.models import ENTITY_TABLES


def registry_status(session: Session, url: str) -> dict:
    """Counts per entity (snake_case plural names), revision and masked URL.

    Reading status needs no login: it reveals no registry content.
    """
    revision = current_revision(session.connection())
    counts = {}
    if revision is not None:
        for name, table in ENTITY_TABLES.items():
            counts[name] = session.exec(select(func.count()).select_from(table)).one()
    return {"url": mask_url(url), "revision": revision, "head": head_revision(),
            "up_to_date": revision == head_revision(), "counts": counts}
