"""Every cell of role x action, against the requirements written in tests/lifecycle/brief.py."""

import itertools

import pytest

from registry.errors import InputError, PermissionDenied
from registry.lifecycle.permissions import (
    ACTION_PHRASES,
    LIFECYCLE_PERMISSIONS,
    PERMISSIONS,
    RECORDED_ONLY,
    Action,
    Role,
    allowed_actions,
    is_allowed,
    require,
    roles_allowed,
)
from registry.lifecycle.states import LifecycleAction
from tests.lifecycle.brief import BRIEF_ACTIONS, BRIEF_ROLES, brief_allows


def test_permission_table_is_the_briefs_list():
    # requirement (tests/lifecycle/brief.py): the registry's user actions; the audit trail's other names are not
    # permissions of their own
    assert sorted(a.value for a in PERMISSIONS) == sorted(BRIEF_ACTIONS)
    assert len(BRIEF_ACTIONS) == len(set(BRIEF_ACTIONS)) == 31  # 30 + user_reactivate (decided)
    assert set(Action) == set(PERMISSIONS) | RECORDED_ONLY
    assert not RECORDED_ONLY & set(PERMISSIONS)


@pytest.mark.parametrize("name", sorted(a.value for a in RECORDED_ONLY))
def test_recorded_only_names_grant_nothing(name):
    with pytest.raises(InputError, match="not a permission"):
        require({"admin", "lab_manager", "analyst", "reviewer", "auditor"}, name)


def test_roles_are_the_briefs_five():
    assert [r.value for r in Role] == BRIEF_ROLES


def test_table_covers_every_action_and_phrase():
    assert set(PERMISSIONS) == set(Action) - RECORDED_ONLY == set(ACTION_PHRASES)


@pytest.mark.parametrize("role,action", list(itertools.product(BRIEF_ROLES, BRIEF_ACTIONS)))
def test_every_cell(role, action):
    # requirement (tests/lifecycle/brief.py), permissions (plus the decisions documented in permissions.py)
    if brief_allows(role, action):
        assert require({role}, action) is None
        assert is_allowed([role], action)
    else:
        with pytest.raises(PermissionDenied):
            require({role}, action, user="x")
        assert not is_allowed([role], action)


@pytest.mark.parametrize("role", BRIEF_ROLES)
def test_every_role_may_view(role):
    # requirement: every role may view
    require({role}, "view")


def test_auditor_changes_nothing():
    # requirement: the auditor reads everything, verifies, exports, traces; changes nothing
    assert {a.value for a in allowed_actions({"auditor"})} == {"view", "audit_verify",
                                                                 "export_data", "trace"}


def test_refusal_message_in_the_briefs_words():
    # required message form: "user 'x' (roles: analyst) may not approve model versions; allowed roles: reviewer"
    with pytest.raises(PermissionDenied) as info:
        require({"analyst"}, Action.MODEL_APPROVE, user="x")
    assert str(info.value) == ("user 'x' (roles: analyst) may not approve model versions; "
                               "allowed roles: reviewer")


def test_several_roles_combine():
    # a user holding two roles may do what either may
    assert is_allowed({"analyst", "reviewer"}, "model_train")
    assert is_allowed({"analyst", "reviewer"}, "model_approve")
    with pytest.raises(PermissionDenied, match=r"\(roles: none\)"):
        require(set(), "predict", user="nobody")


def test_unknown_role_or_action_is_input_error():
    with pytest.raises(InputError) as info:
        require({"superuser"}, "view")
    assert info.value.field == "roles"
    with pytest.raises(InputError):
        roles_allowed("delete_everything")


def test_bare_string_role_is_one_role():
    # "admin" must not be read as the letters a, d, m, i, n
    assert is_allowed("admin", "user_add")


def test_lifecycle_moves_map_to_their_permissions():
    # every user-made move needs a permission; the system move needs none
    assert set(LIFECYCLE_PERMISSIONS) == set(LifecycleAction) - {LifecycleAction.SUPERSEDE}
    for move, action in LIFECYCLE_PERMISSIONS.items():
        assert action.value == f"model_{move.value}"
