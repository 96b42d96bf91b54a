"""Alembic environment: one code path for SQLite and PostgreSQL."""

from __future__ import annotations

from alembic import context

from registry.storage import models  # noqa: F401  (registers every table)
from registry.storage.engine import make_engine
from registry.storage.models import metadata

config = context.config


def run_migrations_offline() -> None:
    context.configure(url=config.get_main_option("sqlalchemy.url"), target_metadata=metadata,
                      literal_binds=True, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    url = config.get_main_option("sqlalchemy.url")
    connectable = config.attributes.get("connection")
    if connectable is not None:
        _run(connectable)
        return
    # Foreign keys stay OFF on the migration connection: SQLite batch rebuilds
    # with them ON cascade-delete child rows.
    engine = make_engine(url, foreign_keys=False)
    try:
        with engine.connect() as connection:
            _run(connection)
    finally:
        engine.dispose()


def _run(connection) -> None:
    context.configure(connection=connection, target_metadata=metadata,
                      render_as_batch=connection.dialect.name == "sqlite",
                      compare_type=True)
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
