"""Models and migrations agree, on SQLite and PostgreSQL (Alembic autogenerate comparison)."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from registry.storage.engine import downgrade, make_engine, upgrade
from registry.storage.models import metadata


def _diff(url: str) -> list:
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            return compare_metadata(ctx, metadata)
    finally:
        engine.dispose()


def test_head_schema_matches_models(any_url):
    assert _diff(any_url) == []


def test_downgrade_to_base_and_upgrade_again(any_url):
    downgrade(any_url, "base")
    engine = make_engine(any_url)
    try:
        names = set(sa.inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()
    assert names == set()
    upgrade(any_url)
    assert _diff(any_url) == []


@pytest.mark.parametrize("statement", [
    "UPDATE audit_event SET action = 'x'",
    "DELETE FROM audit_event",
])
def test_database_refuses_audit_changes(any_url, statement):
    from tests.conftest import populate_basics

    engine = make_engine(any_url)
    try:
        populate_basics(engine)
        with pytest.raises(sa.exc.DBAPIError, match="append-only"):
            with engine.begin() as conn:
                conn.exec_driver_sql(statement)
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT count(*) FROM audit_event").scalar() > 0
    finally:
        engine.dispose()


def test_sqlite_runs_with_foreign_keys_and_wal(sqlite_url):
    engine = make_engine(sqlite_url)
    try:
        with engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
    finally:
        engine.dispose()
