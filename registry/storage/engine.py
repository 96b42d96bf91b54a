"""Engine and session factory, database URL resolution, schema upgrade.

SQLite is the embedded default (a ``specledger.db`` file in the working
directory); PostgreSQL (``postgresql+psycopg://...``) is the multi-site engine.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from sqlalchemy import event, inspect
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import ArgumentError
from sqlmodel import Session, create_engine

from ..errors import InputError

ENV_URL = "SPECLEDGER_DATABASE_URL"
DEFAULT_SQLITE_FILE = "specledger.db"
MIGRATIONS_DIR = Path(__file__).resolve().parents[2] / "migrations"


def resolve_url(url: str | None = None) -> str:
    """The database URL: explicit value, else ``SPECLEDGER_DATABASE_URL``, else ``specledger.db``.

    A bare path (no ``://``) is taken as an SQLite file. ``postgresql://`` is
    upgraded to the psycopg 3 driver.
    """
    url = url or os.environ.get(ENV_URL) or DEFAULT_SQLITE_FILE
    if "://" not in url:
        return f"sqlite:///{Path(url).expanduser()}"
    try:
        parsed = make_url(url)
        parsed.port  # noqa: B018  (a non-numeric port only fails when read)
    except (ArgumentError, ValueError) as exc:
        raise InputError(f"malformed database URL {mask_url(url)!r}: {exc}", field="--db") from None
    backend = parsed.get_backend_name()
    if backend not in ("sqlite", "postgresql"):
        raise InputError(
            f"unsupported database {backend!r} in URL {mask_url(url)!r}; use an SQLite file or "
            "postgresql+psycopg://user@host/db", field="--db")
    if backend == "postgresql" and parsed.drivername == "postgresql":
        parsed = parsed.set(drivername="postgresql+psycopg")
    return parsed.render_as_string(hide_password=False)


def mask_url(url: str) -> str:
    """The URL with any password replaced by ``***``."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except (ArgumentError, ValueError):
        return url.split("@")[-1] if "@" in url else url


#: Page size of new SQLite files. A spectrum of 1,800 float32 points (7.2 kB) needs an
#: overflow page at the default 4 kB and fits one 16 kB page; bulk imports write ~30 %
#: faster (tests/benchmarks/bench_intake.py). It only takes effect on a new, empty file
#: (and must come before WAL is switched on); existing files keep theirs.
SQLITE_PAGE_SIZE = 16384


def _sqlite_new_file(dbapi_connection) -> None:
    cur = dbapi_connection.cursor()
    cur.execute(f"PRAGMA page_size={SQLITE_PAGE_SIZE}")
    cur.close()


def _sqlite_pragmas(dbapi_connection, _record) -> None:
    _sqlite_new_file(dbapi_connection)
    # Foreign keys are off by default in SQLite and must be set per connection.
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=NORMAL")
    # Wait (rather than fail at once) while another process holds the write lock.
    cur.execute("PRAGMA busy_timeout=10000")
    cur.close()


def _sqlite_begin(conn) -> None:
    # pysqlite's own transaction handling defers BEGIN; emit it ourselves so a
    # user action really is one transaction (and SAVEPOINTs work). IMMEDIATE takes
    # the write lock up front: a second writer then waits (busy_timeout) instead of
    # failing when its read snapshot turns out stale, which a deferred BEGIN would do
    # between reading the audit chain's head and appending to it.
    conn.exec_driver_sql("BEGIN IMMEDIATE")


_ENGINES: dict[str, Engine] = {}


def make_engine(url: str | None = None, *, foreign_keys: bool = True) -> Engine:
    """Create an engine for ``url`` with the registry's connection settings."""
    url = resolve_url(url)
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "isolation_level": None})
        if foreign_keys:
            event.listen(engine, "connect", _sqlite_pragmas)
        else:
            def _migration_pragmas(dbapi_connection, _record) -> None:
                _sqlite_new_file(dbapi_connection)
                dbapi_connection.cursor().execute("PRAGMA foreign_keys=OFF")

            event.listen(engine, "connect", _migration_pragmas)
        event.listen(engine, "begin", _sqlite_begin)
    else:
        engine = create_engine(url, pool_pre_ping=True)
    return engine


def get_engine(url: str | None = None) -> Engine:
    """A cached engine per URL (the UI and CLI reuse one)."""
    url = resolve_url(url)
    if url not in _ENGINES:
        _ENGINES[url] = make_engine(url)
    return _ENGINES[url]


def dispose_engines() -> None:
    for engine in _ENGINES.values():
        engine.dispose()
    _ENGINES.clear()


@contextmanager
def session_scope(engine: Engine) -> Iterator[Session]:
    """One session = one transaction: commit on success, roll back on any error."""
    with Session(engine, expire_on_commit=False) as session:
        try:
            yield session
            session.commit()
        except BaseException:
            session.rollback()
            raise


def alembic_config(url: str):
    from alembic.config import Config

    if not (MIGRATIONS_DIR / "env.py").exists():
        raise RuntimeError(f"migrations not found at {MIGRATIONS_DIR}")
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


def upgrade(url: str | None = None, revision: str = "head") -> None:
    """Bring the database at ``url`` to ``revision`` (creating an SQLite file if missing)."""
    from alembic import command

    url = resolve_url(url)
    command.upgrade(alembic_config(url), revision)


def downgrade(url: str | None = None, revision: str = "base") -> None:
    from alembic import command

    url = resolve_url(url)
    command.downgrade(alembic_config(url), revision)


def current_revision(bind) -> str | None:
    """Schema revision of the database behind ``bind`` (an Engine or an open Connection).

    Pass the session's connection inside a transaction: a second connection would wait
    for the SQLite write lock the session itself holds.
    """
    from alembic.runtime.migration import MigrationContext
    from sqlalchemy.engine import Connection

    if isinstance(bind, Connection):
        return MigrationContext.configure(bind).get_current_revision()
    with bind.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def head_revision() -> str:
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()


def has_schema(bind) -> bool:
    """Whether the registry's tables exist (``bind``: Engine or open Connection)."""
    return inspect(bind).has_table("audit_event")
