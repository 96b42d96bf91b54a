"""Finding one stored row by the name a user gives for it."""

from __future__ import annotations

from sqlmodel import Session, select

from ..errors import NotFoundError
from .models import ModelVersion


def get_model(session: Session, label: str) -> ModelVersion:
    """The model version with this label (or, for digits only, this id)."""
    mv = session.exec(select(ModelVersion).where(ModelVersion.label == label)).first()
    if mv is None and label.isdigit():
        mv = session.get(ModelVersion, int(label))
    if mv is None:
        raise NotFoundError(f"unknown model version {label!r}")
    return mv
