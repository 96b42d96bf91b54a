"""Model-version states: every (state, action) pair against the required moves (tests/lifecycle/brief.py)."""

import itertools

import pytest

from registry.errors import InputError, PermissionDenied, StateError
from registry.lifecycle.states import (
    TERMINAL_STATES,
    TRANSITIONS,
    LifecycleAction,
    ModelState,
    allowed_actions,
    check_separation_of_duties,
    check_transition,
    is_terminal,
)
from tests.lifecycle.brief import (
    BRIEF_LIFECYCLE_ACTIONS,
    BRIEF_STATES,
    brief_moves,
)

MOVES = brief_moves()


def test_enums_hold_exactly_the_briefs_names():
    # requirement (tests/lifecycle/brief.py): the eight states and seven actions by name
    assert [s.value for s in ModelState] == BRIEF_STATES
    assert [a.value for a in LifecycleAction] == BRIEF_LIFECYCLE_ACTIONS


def test_table_equals_briefs_moves():
    # requirement (tests/lifecycle/brief.py), model lifecycle
    assert {(s.value, a.value): t.value for (s, a), t in TRANSITIONS.items()} == MOVES


@pytest.mark.parametrize("state,action", list(itertools.product(BRIEF_STATES,
                                                                BRIEF_LIFECYCLE_ACTIONS)))
def test_every_state_action_pair(state, action):
    # requirement (tests/lifecycle/brief.py): legal moves lead where it says,
    # every other pair is refused with the state and the allowed actions named.
    if (state, action) in MOVES:
        assert check_transition(state, action) == MOVES[(state, action)]
        return
    with pytest.raises(StateError) as info:
        check_transition(state, action, label="model v3")
    message = str(info.value)
    assert f"model v3 is {state}" in message
    legal = [a for a in BRIEF_LIFECYCLE_ACTIONS if (state, a) in MOVES]
    if not legal:
        assert "final" in message
    else:
        listed = message.split("allowed actions: ")[1].split(", ")
        # users are not offered the system's own move unless they tried it
        expected = [a for a in legal if a != "supersede" or action == "supersede"]
        assert listed == expected


def test_message_in_the_briefs_words():
    # required message form: "model v3 is in_review; allowed actions: approve, reject"
    with pytest.raises(StateError, match="model v3 is in_review; allowed actions: approve, reject$"):
        check_transition(ModelState.IN_REVIEW, LifecycleAction.ACTIVATE, label="model v3")


def test_terminal_states_are_those_with_no_way_out():
    # requirement: retired, superseded and rejected are terminal
    no_exit = {s for s in BRIEF_STATES if not any((s, a) in MOVES for a in BRIEF_LIFECYCLE_ACTIONS)}
    assert {s.value for s in TERMINAL_STATES} == no_exit == {"retired", "superseded", "rejected"}
    assert all(is_terminal(s) for s in no_exit)
    assert allowed_actions("retired", include_system=True) == []


def test_allowed_actions_hide_the_system_move_from_users():
    # requirement: supersede is a system action
    assert allowed_actions("active") == ["validate", "activate", "retire"]
    assert allowed_actions("active", include_system=True) == ["validate", "activate", "retire",
                                                              "supersede"]


@pytest.mark.parametrize("state,action", [("drafted", "validate"), ("draft", "publish")])
def test_unknown_names_are_input_errors(state, action):
    with pytest.raises(InputError) as info:
        check_transition(state, action)
    assert info.value.field in ("state", "action")


# --- separation of duties (requirement: the approver is neither the author
# --- nor the creator of the calibration set; only the author submits)

def test_author_may_not_approve_own_version():
    with pytest.raises(PermissionDenied, match="author"):
        check_separation_of_duties("approve", actor_id=7, author_id=7, calset_creator_id=9)


def test_calibration_set_creator_may_not_approve():
    with pytest.raises(PermissionDenied, match="calibration set"):
        check_separation_of_duties("approve", actor_id=9, author_id=7, calset_creator_id=9)


def test_independent_reviewer_may_approve():
    assert check_separation_of_duties("approve", actor_id=3, author_id=7, calset_creator_id=9) is None
    # creator not recorded: only the author rule applies
    assert check_separation_of_duties("approve", actor_id=3, author_id=7,
                                      calset_creator_id=None) is None


def test_only_author_submits():
    assert check_separation_of_duties("submit", actor_id=7, author_id=7, calset_creator_id=9) is None
    with pytest.raises(PermissionDenied, match="only its author"):
        check_separation_of_duties("submit", actor_id=3, author_id=7, calset_creator_id=9)


@pytest.mark.parametrize("action", ["validate", "reject", "activate", "retire", "supersede"])
def test_other_moves_carry_no_person_rule(action):
    # documented choice: only approve and submit are person-specific
    assert check_separation_of_duties(action, actor_id=7, author_id=7, calset_creator_id=7) is None


def test_missing_author_is_an_input_error():
    with pytest.raises(InputError):
        check_separation_of_duties("approve", actor_id=3, author_id=None, calset_creator_id=None)
