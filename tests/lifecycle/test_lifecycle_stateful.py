"""Random sequences of lifecycle actions by random users, checked against the requirements.

The machine acts as a service would (role check, separation of duties, state
move) and compares each outcome with the oracle of required moves
(tests/lifecycle/brief.py): no sequence may reach a state it does not
allow, and nobody may approve a version they authored or whose calibration set
they created.
"""

from hypothesis import settings
from hypothesis import strategies as st
from hypothesis.stateful import (
    Bundle,
    RuleBasedStateMachine,
    invariant,
    precondition,
    rule,
)

from registry.errors import PermissionDenied, StateError
from registry.lifecycle.permissions import LIFECYCLE_PERMISSIONS, require
from registry.lifecycle.states import (
    LifecycleAction,
    ModelState,
    check_separation_of_duties,
    check_transition,
)
from tests.lifecycle.brief import BRIEF_STATES, brief_allows, brief_moves

MOVES = brief_moves()
USER_ACTIONS = ["validate", "submit", "approve", "reject", "activate", "retire"]

# a small staff so authors, creators and reviewers often coincide
USERS = {
    1: {"analyst"},
    2: {"analyst", "reviewer"},
    3: {"reviewer"},
    4: {"lab_manager"},
    5: {"lab_manager", "analyst"},
    6: {"auditor"},
    7: {"admin"},
    8: {"reviewer", "lab_manager"},
}


class Version:
    def __init__(self, author, creator):
        self.author, self.creator = author, creator
        self.state = "draft"
        self.history = [("draft", None, None)]   # (state reached, action, actor)


def oracle(version, action, actor):
    """Would the requirements (brief.py) allow ``actor`` to do ``action`` to ``version`` now?"""
    if (version.state, action) not in MOVES:
        return False
    if not any(brief_allows(role, f"model_{action}") for role in USERS[actor]):
        return False
    if action == "submit" and actor != version.author:
        return False
    if action == "approve" and actor in (version.author, version.creator):
        return False
    return True


class LifecycleMachine(RuleBasedStateMachine):
    versions = Bundle("versions")

    def __init__(self):
        super().__init__()
        self.all_versions = []

    @precondition(lambda self: len(self.all_versions) < 3)   # few versions, long lives
    @rule(target=versions, author=st.sampled_from([1, 2, 5]),
          creator=st.sampled_from([2, 3, 4, 5, 8]))
    def train(self, author, creator):
        version = Version(author, creator)
        self.all_versions.append(version)
        return version

    @rule(version=versions, data=st.data())
    def act(self, version, data):
        # mostly moves the requirements allow from this state, by users holding a fitting
        # role, so that long lives (approved, active, retired) are reached; the rest
        # is anything by anyone
        legal = [a for a in USER_ACTIONS if (version.state, a) in MOVES]
        if legal and data.draw(st.integers(0, 9), label="steer") < 8:
            action = data.draw(st.sampled_from(legal), label="action")
            fitting = [u for u, roles in USERS.items()
                       if any(brief_allows(r, f"model_{action}") for r in roles)]
            if action == "submit" and data.draw(st.booleans(), label="author acts"):
                fitting = [version.author]
            actor = data.draw(st.sampled_from(fitting), label="actor")
        else:
            action = data.draw(st.sampled_from(USER_ACTIONS), label="action")
            actor = data.draw(st.sampled_from(sorted(USERS)), label="actor")
        expected = oracle(version, action, actor)
        try:
            require(USERS[actor], LIFECYCLE_PERMISSIONS[LifecycleAction(action)], user=str(actor))
            check_separation_of_duties(action, actor, version.author, version.creator)
            new_state = check_transition(version.state, action)
        except (PermissionDenied, StateError):
            assert not expected, (version.state, action, actor)
            return
        assert expected, (version.state, action, actor)
        assert new_state == MOVES[(version.state, action)]
        version.state = new_state.value
        version.history.append((version.state, action, actor))

    @rule(version=versions)
    def another_version_takes_over(self, version):
        # system action: no user, no role check
        try:
            new_state = check_transition(version.state, "supersede")
        except StateError:
            assert (version.state, "supersede") not in MOVES
            return
        assert version.state == "active"
        version.state = new_state.value
        version.history.append((version.state, "supersede", None))

    @invariant()
    def states_are_legal_and_reached_by_legal_moves(self):
        for version in self.all_versions:
            assert version.state in BRIEF_STATES and ModelState(version.state)
            for (before, _, _), (after, action, _) in zip(version.history, version.history[1:]):
                assert MOVES[(before, action)] == after

    @invariant()
    def nobody_approves_their_own_work(self):
        for version in self.all_versions:
            for _, action, actor in version.history:
                if action == "approve":
                    assert actor not in (version.author, version.creator)
                if action == "submit":
                    assert actor == version.author

    @invariant()
    def terminal_states_are_never_left(self):
        for version in self.all_versions:
            states = [s for s, _, _ in version.history]
            for i, s in enumerate(states):
                if s in ("retired", "superseded", "rejected"):
                    assert i == len(states) - 1


LifecycleMachine.TestCase.settings = settings(max_examples=100, stateful_step_count=50,
                                              deadline=None)
TestLifecycle = LifecycleMachine.TestCase
