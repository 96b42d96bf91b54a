"""A stateful property test of the lifecycle *through the services* (hypothesis).

Random sequences of submit / approve / reject / activate / retire on one validated
version, each by the user whose role and duty it is. The oracle is the required list
of legal moves (tests/lifecycle/brief.py): a legal move must succeed and lead to the
listed state; any other must be refused with a StateError naming the current state,
and write nothing. Kept small (a few examples) because every signature re-checks a
password with argon2.
"""

from __future__ import annotations

from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, invariant, rule, run_state_machine_as_test
from sqlmodel import select

from registry.errors import StateError
from registry.services import lifecycle
from registry.storage.engine import make_engine, session_scope
from registry.storage.models import Deployment, ModelVersion
from tests.conftest import PASSWORD
from tests.lifecycle.brief import brief_moves
from tests.factories import copy_sqlite
from tests.lifecycle_services.conftest import Reg

MOVES = brief_moves()

CALLS = {
    "submit": ("analyst", lambda s, a, label, inst: lifecycle.submit_model(s, a, label)),
    "approve": ("reviewer", lambda s, a, label, inst: lifecycle.approve_model(
        s, a, label, password=PASSWORD, reason="ok")),
    "reject": ("reviewer", lambda s, a, label, inst: lifecycle.reject_model(
        s, a, label, password=PASSWORD, reason="no")),
    "activate": ("lab_manager", lambda s, a, label, inst: lifecycle.activate_model(
        s, a, label, instrument=inst, password=PASSWORD)),
    "retire": ("lab_manager", lambda s, a, label, inst: lifecycle.retire_model(
        s, a, label, password=PASSWORD, reason="end")),
}


def test_service_lifecycle_follows_the_brief(built, tmp_path):
    counter = iter(range(10_000))

    class Machine(RuleBasedStateMachine):
        def __init__(self):
            super().__init__()
            path = tmp_path / f"m{next(counter)}.db"
            copy_sqlite(built["path"], path)
            engine = make_engine(f"sqlite:///{path}")
            self.reg = Reg(url=f"sqlite:///{path}", path=path, engine=engine,
                           actors=built["actors"], v1=built["v1"], v2=built["v2"], tmp=tmp_path)
            self.state = "validated"
            self.deployed: set[str] = set()

        def teardown(self):
            self.reg.engine.dispose()

        @rule(action=st.sampled_from(sorted(CALLS)), instrument=st.sampled_from(["IR-100", "IR-200"]))
        def move(self, action, instrument):
            role, call = CALLS[action]
            legal = (self.state, action) in MOVES
            if action == "activate" and instrument in self.deployed:
                legal = False  # already active there: activating again is refused
            before = self.reg.counts()
            try:
                with session_scope(self.reg.engine) as s:
                    call(s, self.reg.actors[role], self.reg.v1, instrument)
            except StateError as exc:
                assert not legal, f"{action} from {self.state} refused: {exc}"
                assert self.state in str(exc)
                assert self.reg.counts() == before
                return
            assert legal, f"{action} from {self.state} was let through"
            self.state = MOVES[(self.state, action)]
            if action == "activate":
                self.deployed.add(instrument)
            if action == "retire":
                self.deployed.clear()

        @invariant()
        def stored_state_matches(self):
            with session_scope(self.reg.engine) as s:
                mv = s.exec(select(ModelVersion).where(ModelVersion.label == self.reg.v1)).one()
                assert mv.state == self.state
                active = s.exec(select(Deployment).where(Deployment.model_version_id == mv.id,
                                                         Deployment.state == "active")).all()
                serials = {"IR-100": 1, "IR-200": 2}
                assert {d.instrument_id for d in active} == {serials[i] for i in self.deployed}

    run_state_machine_as_test(Machine, settings=settings(
        max_examples=12, stateful_step_count=6, deadline=None,
        suppress_health_check=[HealthCheck.too_slow]))
