"""The database's own guard on the audit trail: UPDATE, DELETE (and on PostgreSQL TRUNCATE)
of ``audit_event`` are refused by triggers, whatever client connects (registry code or raw SQL).

Written once here for the migrations that create it (0002) and for those that rebuild
``audit_event`` on SQLite (0004, 0006): a batch rebuild copies the table and drops its
triggers, so they are lifted around the rebuild and created again exactly as before.
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

from alembic import op

GUARDED = "audit_event"
_SQLITE_VERBS = ("UPDATE", "DELETE")


def _sqlite() -> bool:
    return op.get_bind().dialect.name == "sqlite"


def _create_sqlite_triggers() -> None:
    for verb in _SQLITE_VERBS:
        op.execute(f"CREATE TRIGGER trg_{GUARDED}_no_{verb.lower()} BEFORE {verb} ON {GUARDED} "
                   f"BEGIN SELECT RAISE(ABORT, 'audit_event is append-only: {verb} refused'); END")


def _drop_sqlite_triggers() -> None:
    for verb in _SQLITE_VERBS:
        op.execute(f"DROP TRIGGER IF EXISTS trg_{GUARDED}_no_{verb.lower()}")


def create_guard() -> None:
    """Create the append-only triggers on the migration's connection."""
    if _sqlite():
        _create_sqlite_triggers()
        return
    op.execute(
        "CREATE OR REPLACE FUNCTION specledger_refuse_audit_change() RETURNS trigger "
        "LANGUAGE plpgsql AS $$ BEGIN RAISE EXCEPTION 'audit_event is append-only: % refused', "
        "TG_OP; END $$")
    op.execute(
        f"CREATE TRIGGER trg_{GUARDED}_append_only BEFORE UPDATE OR DELETE ON {GUARDED} "
        "FOR EACH ROW EXECUTE FUNCTION specledger_refuse_audit_change()")
    op.execute(
        f"CREATE TRIGGER trg_{GUARDED}_no_truncate BEFORE TRUNCATE ON {GUARDED} "
        "FOR EACH STATEMENT EXECUTE FUNCTION specledger_refuse_audit_change()")


def drop_guard() -> None:
    """Drop the append-only triggers (the downgrade of 0002)."""
    if _sqlite():
        _drop_sqlite_triggers()
        return
    op.execute(f"DROP TRIGGER IF EXISTS trg_{GUARDED}_append_only ON {GUARDED}")
    op.execute(f"DROP TRIGGER IF EXISTS trg_{GUARDED}_no_truncate ON {GUARDED}")
    op.execute("DROP FUNCTION IF EXISTS specledger_refuse_audit_change()")


@contextmanager
def lifted_for_sqlite_rebuild() -> Iterator[None]:
    """On SQLite, drop the triggers around a batch rebuild of audit_event and create them
    again afterwards; PostgreSQL alters the table in place and keeps its triggers."""
    sqlite = _sqlite()
    if sqlite:
        _drop_sqlite_triggers()
    yield
    if sqlite:
        _create_sqlite_triggers()
