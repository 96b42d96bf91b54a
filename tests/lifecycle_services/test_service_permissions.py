"""Every role × lifecycle service: refused with a clear message and nothing written, or let through.

Expected cells come from the required role duties written down in
tests/lifecycle/brief.py (not from the registry's own table). "Nothing written" is
checked strictly: the session is committed after the refusal, then every table's row
count (audit events included) is compared.
"""

from __future__ import annotations

import pytest
from sqlmodel import Session, select

from registry.errors import PermissionDenied, RegistryError
from registry.services import lifecycle, qc, revalidation
from registry.storage.engine import session_scope
from registry.storage.models import ModelVersion, RevalidationTrigger
from tests.conftest import PASSWORD
from tests.lifecycle.brief import BRIEF_ROLES, brief_allows


def _trigger_ids(reg) -> dict[str, int]:
    # Set-up rows written directly: one open trigger of each kind the clear services need.
    with session_scope(reg.engine) as s:
        mv = s.exec(select(ModelVersion)).first()
        ids = {}
        for kind in ("qc_signal", "method_change"):
            t = RevalidationTrigger(model_version_id=mv.id, kind=kind, detail={"instrument": "IR-100"})
            s.add(t)
            s.flush()
            ids[kind] = t.id
    return ids


SERVICES = {
    "submit_model": ("model_submit", lambda s, a, r, t: lifecycle.submit_model(s, a, r.v1)),
    "approve_model": ("model_approve", lambda s, a, r, t: lifecycle.approve_model(
        s, a, r.v1, password=PASSWORD, reason="ok")),
    "reject_model": ("model_reject", lambda s, a, r, t: lifecycle.reject_model(
        s, a, r.v1, password=PASSWORD, reason="not good enough")),
    "activate_model": ("model_activate", lambda s, a, r, t: lifecycle.activate_model(
        s, a, r.v1, instrument="IR-100", password=PASSWORD)),
    "retire_model": ("model_retire", lambda s, a, r, t: lifecycle.retire_model(
        s, a, r.v1, password=PASSWORD, reason="end")),
    "add_qc_result": ("qc_add", lambda s, a, r, t: qc.add_qc_result(
        s, a, instrument="IR-100", material="QC-1", value=90.0, known_value=90.0,
        property_code="RON")),
    "clear_qc_signal": ("qc_clear_signal", lambda s, a, r, t: qc.clear_qc_signal(
        s, a, t["qc_signal"], "cause found")),
    "set_policy": ("policy_edit", lambda s, a, r, t: revalidation.set_policy(
        s, a, "RON", None, 200)),
    "raise_trigger": ("trigger_raise", lambda s, a, r, t: revalidation.raise_trigger(
        s, a, r.v1, "method_change", "by hand")),
    "clear_trigger": ("trigger_raise", lambda s, a, r, t: revalidation.clear_trigger(
        s, a, t["method_change"], "raised in error")),
    "edit_method": ("method_edit", lambda s, a, r, t: revalidation.edit_method(
        s, a, "ASTM D2699", "RON", reproducibility=0.8)),
    "due_list": ("view", lambda s, a, r, t: revalidation.due_list(s, a)),
    "list_policies": ("view", lambda s, a, r, t: revalidation.list_policies(s, a)),
    "list_triggers": ("view", lambda s, a, r, t: revalidation.list_triggers(s, a)),
    "model_signatures": ("view", lambda s, a, r, t: lifecycle.model_signatures(s, a, r.v1)),
}


@pytest.mark.parametrize("service", sorted(SERVICES))
def test_every_role_is_refused_or_let_through_as_the_brief_says(reg, service):
    action, call = SERVICES[service]
    triggers = _trigger_ids(reg)
    refused = [r for r in BRIEF_ROLES if not brief_allows(r, action)]
    allowed = [r for r in BRIEF_ROLES if brief_allows(r, action)]
    assert allowed, f"the requirements (brief.py) give {action} to some role"
    before = reg.counts()
    for role in refused:
        actor = reg.actors[role]
        with Session(reg.engine) as s:
            with pytest.raises(PermissionDenied) as err:
                call(s, actor, reg, triggers)
            s.commit()  # commit whatever the refused call might have staged: must be nothing
        message = str(err.value)
        assert f"user {actor.name!r}" in message and "may not" in message
        assert "allowed roles:" in message, message
        assert reg.counts() == before, f"{service} refused for {role} but wrote rows"
    for role in allowed:
        with Session(reg.engine) as s:
            try:
                call(s, reg.actors[role], reg, triggers)
            except PermissionDenied as exc:
                # Allowed by role; only a rule about this very version may refuse
                # (e.g. only the author submits), never the role table.
                assert "allowed roles:" not in str(exc), str(exc)
            except RegistryError:
                pass  # past the role check; the state of the version decides
            finally:
                s.rollback()
