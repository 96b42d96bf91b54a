"""append-only guard on the audit trail

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""
from typing import Sequence, Union

from alembic import op

revision: str = "0002"
down_revision: Union[str, None] = "0001"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    _create_append_only_guard()


def downgrade() -> None:
    _drop_append_only_guard()


# The audit trail is append-only: the database itself refuses UPDATE and DELETE
# on audit_event, whatever client connects (registry code or raw SQL).
_GUARDED = "audit_event"


def _create_append_only_guard() -> None:
    bind = op.get_bind()
    if bind.dialect.name == "sqlite":
        for verb in ("UPDATE", "DELETE"):
            op.execute(
                f"CREATE TRIGGER trg_{_GUARDED}_no_{verb.lower()} BEFORE {verb} ON {_GUARDED} "
                f"BEGIN SELECT RAISE(ABORT, 'audit_event is append-only: {verb} refused'); END")
    else:
        op.execute(
            "CREATE OR REPLACE FUNCTION specledger_refuse_audit_change() RETURNS trigger "
            "LANGUAGE plpgsql AS $$ BEGIN RAISE EXCEPTION 'audit_event is append-only: % refused', "
            "TG_OP; END $$")
        op.execute(
            f"CREATE TRIGGER trg_{_GUARDED}_append_only BEFORE UPDATE OR DELETE ON {_GUARDED} "
            "FOR EACH ROW EXECUTE FUNCTION specledger_refuse_audit_change()")
        op.execute(
            f"CREATE TRIGGER trg_{_GUARDED}_no_truncate BEFORE TRUNCATE ON {_GUARDED} "
            "FOR EACH STATEMENT EXECUTE FUNCTION specledger_refuse_audit_change()")


def _drop_append_only_guard() -> None:
    bind = op.get_bind()
    if bind.dialect.name == "sqlite":
        for verb in ("update", "delete"):
            op.execute(f"DROP TRIGGER IF EXISTS trg_{_GUARDED}_no_{verb}")
    else:
        op.execute(f"DROP TRIGGER IF EXISTS trg_{_GUARDED}_append_only ON {_GUARDED}")
        op.execute(f"DROP TRIGGER IF EXISTS trg_{_GUARDED}_no_truncate ON {_GUARDED}")
        op.execute("DROP FUNCTION IF EXISTS specledger_refuse_audit_change()")
