"""Shared fixtures: fresh registries on SQLite and PostgreSQL, users of every role."""

from __future__ import annotations

import os
import socket
import uuid
from urllib.parse import urlsplit

import pytest
import sqlalchemy as sa
from hypothesis import settings as hypothesis_settings

from registry.storage.engine import make_engine, session_scope, upgrade

# CI explores the same examples every run (a red run must mean a change broke something);
# local runs keep exploring new examples, which is how the fuzzers find real bugs.
hypothesis_settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
if os.environ.get("CI"):
    hypothesis_settings.load_profile("ci")

PG_URL = os.environ.get("SPECLEDGER_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test")
PASSWORD = "test-password-1"
ROLE_USERS = {"admin": "ada", "lab_manager": "lena", "analyst": "anton", "reviewer": "rita",
              "auditor": "otto"}


def _pg_answers() -> bool:
    parts = urlsplit(PG_URL.replace("+psycopg", ""))
    try:
        with socket.create_connection((parts.hostname or "127.0.0.1", parts.port or 5432), timeout=2):
            return True
    except OSError:
        return False


def require_pg() -> None:
    if not _pg_answers():
        if os.environ.get("CI"):
            pytest.fail(f"PostgreSQL does not answer at {PG_URL} and CI is set")
        pytest.skip(f"PostgreSQL does not answer at {PG_URL} (set SPECLEDGER_TEST_PG_URL)")


def fresh_pg_database() -> tuple[str, callable]:
    """Create an empty database on the test server; returns its URL and a drop function."""
    require_pg()
    admin = sa.create_engine(PG_URL, isolation_level="AUTOCOMMIT")
    name = f"specledger_test_{uuid.uuid4().hex[:12]}"
    with admin.connect() as conn:
        conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    url = sa.engine.make_url(PG_URL).set(database=name).render_as_string(hide_password=False)

    def drop() -> None:
        with admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()
    return url, drop


@pytest.fixture
def sqlite_url(tmp_path) -> str:
    url = f"sqlite:///{tmp_path / 'registry.db'}"
    upgrade(url)
    return url


@pytest.fixture
def pg_url():
    url, drop = fresh_pg_database()
    upgrade(url)
    yield url
    from registry.storage.engine import dispose_engines

    dispose_engines()
    drop()


@pytest.fixture(params=["sqlite", "postgresql"])
def any_url(request, tmp_path):
    """A migrated registry on each engine in turn."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'registry.db'}"
        upgrade(url)
        yield url
        return
    url, drop = fresh_pg_database()
    upgrade(url)
    yield url
    from registry.storage.engine import dispose_engines

    dispose_engines()
    drop()


def populate_basics(engine) -> dict:
    """Catalog, one site, one instrument, users of every role; returns actors by role."""
    from registry.services import admin as svc
    from registry.services.auth import actor_of

    with session_scope(engine) as s:
        svc.seed_catalog(s)
        root = svc.add_user(s, None, ROLE_USERS["admin"], ["admin"], PASSWORD)
        root_actor = actor_of(root)
        actors = {"admin": root_actor}
        for role, name in ROLE_USERS.items():
            if role != "admin":
                actors[role] = actor_of(svc.add_user(s, root_actor, name, [role], PASSWORD))
        svc.add_site(s, root_actor, "Harbour Lab", timezone="Europe/Lisbon")
        svc.add_instrument(s, root_actor, "IR-100", site="Harbour Lab")
        svc.add_grade(s, root_actor, "PREM95", name="Premium gasoline", family="gasoline")
    return actors


@pytest.fixture
def registry(sqlite_url):
    """(engine, actors) for a small SQLite registry with users of every role."""
    engine = make_engine(sqlite_url)
    actors = populate_basics(engine)
    yield engine, actors
    engine.dispose()


@pytest.fixture(scope="session")
def every_family_built(tmp_path_factory):
    """A registry with one version of each model family in service, with predictions
    (tests/family_registry.py), built once per session: copy ``.path`` per test."""
    from tests.family_registry import build_every_family

    return build_every_family(tmp_path_factory.mktemp("every_family"))
