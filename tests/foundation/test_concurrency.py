"""Several writers at once: every action lands, the audit chain stays one chain.

SQLite serialises writers (one write lock); the registry takes that lock at the start of
each action so a second writer waits instead of failing. PostgreSQL serialises audit
appends with an advisory lock.
"""

from __future__ import annotations

import threading

import pytest

from registry.lineage.verify import verify_registry as verify_chain
from registry.services import admin
from registry.services.auth import actor_of
from registry.storage.engine import make_engine, session_scope


@pytest.mark.parametrize("writers,actions", [(3, 15)])
def test_concurrent_actions_all_land_in_one_chain(any_url, writers, actions):
    engine = make_engine(any_url)
    with session_scope(engine) as s:
        root = actor_of(admin.add_user(s, None, "root", ["admin"], "pw-long-1"))
    errors: list[str] = []

    def work(k: int) -> None:
        own = make_engine(any_url)
        try:
            for i in range(actions):
                try:
                    with session_scope(own) as s:
                        admin.add_grade(s, root, f"G{k}-{i}")
                except Exception as exc:  # collected: the assertion below shows them
                    errors.append(f"{type(exc).__name__}: {str(exc)[:120]}")
        finally:
            own.dispose()

    threads = [threading.Thread(target=work, args=(k,)) for k in range(writers)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    with session_scope(engine) as s:
        report = verify_chain(s)
    assert report.intact and report.n_events == 1 + writers * actions
    engine.dispose()
