"""Developer tool for migrations.

``python -m registry.storage.revise "message"``
    autogenerate a new revision against a scratch SQLite database at head.
``python -m registry.storage.revise --initial``
    rewrite revision 0001 from the models. Only allowed while no registry
    outside development has been created from it (before the first release);
    after that every change is a new revision.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from alembic import command
from alembic.autogenerate import produce_migrations, render_python_code
from alembic.runtime.migration import MigrationContext

from .engine import MIGRATIONS_DIR, alembic_config, make_engine, upgrade
from .models import metadata

INITIAL = MIGRATIONS_DIR / "versions" / "0001_initial_registry_schema.py"

_TEMPLATE = '''"""initial registry schema

Revision ID: 0001
Revises:
Create Date: 2026-12-02

Generated from registry.storage.models by ``python -m registry.storage.revise --initial``.
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import registry.storage.types

revision: str = "0001"
down_revision: Union[str, None] = None
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
{upgrade}


def downgrade() -> None:
{downgrade}
'''


def _indent(code: str) -> str:
    return "\n".join(("    " + ln.lstrip()) if ln.startswith("#") else ln for ln in code.splitlines())


def rewrite_initial() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        engine = make_engine(f"sqlite:///{Path(tmp) / 'empty.db'}")
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True, "render_as_batch": False})
            ops = produce_migrations(ctx, metadata)
        engine.dispose()
    opts = {"alembic_module_prefix": "op.", "sqlalchemy_module_prefix": "sa.",
            "render_as_batch": False}
    up = _indent(render_python_code(ops.upgrade_ops, **opts))
    down = _indent(render_python_code(ops.downgrade_ops, **opts))
    INITIAL.write_text(_TEMPLATE.format(upgrade=up.rstrip(), downgrade=down.rstrip()))
    print(f"rewrote {INITIAL}")


def new_revision(message: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'scratch.db'}"
        upgrade(url)
        command.revision(alembic_config(url), message=message, autogenerate=True)


if __name__ == "__main__":
    if sys.argv[1:] == ["--initial"]:
        rewrite_initial()
    else:
        new_revision(" ".join(sys.argv[1:]) or "schema change")
