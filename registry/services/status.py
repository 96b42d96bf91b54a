"""Registry status: URL, schema revision, row counts, what is in service."""

from __future__ import annotations

from sqlalchemy import func
from sqlmodel import Session, select

from ..lifecycle.states import IN_SERVICE_STATES, DeploymentState
from ..storage.engine import current_revision, head_revision, mask_url
from ..storage.models import ENTITY_TABLES, Deployment, ModelVersion


def registry_status(session: Session, url: str) -> dict:
    """Counts per entity (snake_case plural names), revision and masked URL, and
    ``in_service``: ``active_deployments`` (deployments in the active state; superseded
    and retired ones are history) and ``versions_in_service`` (approved or active).

    Reading status needs no login: it reveals no registry content.
    """
    revision = current_revision(session.connection())
    counts, in_service = {}, {}
    if revision is not None:
        for name, table in ENTITY_TABLES.items():
            counts[name] = session.exec(select(func.count()).select_from(table)).one()
        in_service = {
            "active_deployments": session.exec(select(func.count()).select_from(Deployment).where(
                Deployment.state == DeploymentState.ACTIVE)).one(),
            "versions_in_service": session.exec(select(func.count()).select_from(ModelVersion).where(
                ModelVersion.state.in_(IN_SERVICE_STATES))).one()}
    return {"url": mask_url(url), "revision": revision, "head": head_revision(),
            "up_to_date": revision == head_revision(), "counts": counts, "in_service": in_service}
