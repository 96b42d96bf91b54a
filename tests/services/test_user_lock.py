"""Locking and unlocking an account: admin only, never the admin's own, each an audited act."""

from __future__ import annotations

import pytest

from registry.errors import AuthenticationError, InputError, PermissionDenied
from registry.services import admin
from registry.services.audit import verify_registry
from registry.services.auth import authenticate
from registry.storage.engine import session_scope
from tests.conftest import PASSWORD, ROLE_USERS


def test_a_locked_user_cannot_sign_in_until_unlocked(registry):
    engine, actors = registry
    rita = ROLE_USERS["reviewer"]
    with session_scope(engine) as s:
        admin.deactivate_user(s, actors["admin"], rita)
    with pytest.raises(AuthenticationError), session_scope(engine) as s:
        authenticate(s, rita, PASSWORD)
    with pytest.raises(InputError, match="deactivated already"), session_scope(engine) as s:
        admin.deactivate_user(s, actors["admin"], rita)
    with session_scope(engine) as s:
        admin.reactivate_user(s, actors["admin"], rita)
    with session_scope(engine) as s:
        assert authenticate(s, rita, PASSWORD).name == rita
        assert verify_registry(s, actors["auditor"]).intact
    with pytest.raises(InputError, match="active already"), session_scope(engine) as s:
        admin.reactivate_user(s, actors["admin"], rita)


@pytest.mark.parametrize("role", ["lab_manager", "analyst", "reviewer", "auditor"])
def test_only_an_admin_unlocks(registry, role):
    engine, actors = registry
    with session_scope(engine) as s:
        admin.deactivate_user(s, actors["admin"], ROLE_USERS["analyst" if role != "analyst" else "auditor"])
    with pytest.raises(PermissionDenied, match="may not reactivate users"), session_scope(engine) as s:
        admin.reactivate_user(s, actors[role], ROLE_USERS["analyst" if role != "analyst" else "auditor"])
