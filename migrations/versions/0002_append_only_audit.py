"""append-only guard on the audit trail

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""
from typing import Sequence, Union

from registry.storage import append_only

revision: str = "0002"
down_revision: Union[str, None] = "0001"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    # The audit trail is append-only: the database itself refuses UPDATE and DELETE
    # on audit_event, whatever client connects (registry code or raw SQL).
    append_only.create_guard()


def downgrade() -> None:
    append_only.drop_guard()
