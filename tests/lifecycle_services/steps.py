"""Short service-call steps shared by the lifecycle service tests."""

from __future__ import annotations

from registry.services import lifecycle
from registry.storage.engine import session_scope
from tests.conftest import PASSWORD


def submit(reg, label: str, who: str = "analyst") -> None:
    with session_scope(reg.engine) as s:
        lifecycle.submit_model(s, reg.actors[who], label, "ready for review")


def approve(reg, label: str, who: str = "reviewer"):
    with session_scope(reg.engine) as s:
        return lifecycle.approve_model(s, reg.actors[who], label, password=PASSWORD,
                                       reason="meets the acceptance criteria")


def activate(reg, label: str, instrument: str = "IR-100"):
    with session_scope(reg.engine) as s:
        return lifecycle.activate_model(s, reg.actors["lab_manager"], label, instrument=instrument,
                                        password=PASSWORD, reason="into service")


def approved(reg, label: str, author: str = "analyst") -> None:
    submit(reg, label, author)
    approve(reg, label)


def in_service(reg, label: str, author: str = "analyst", instrument: str = "IR-100") -> None:
    approved(reg, label, author)
    activate(reg, label, instrument)
