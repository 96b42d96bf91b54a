"""Column types shared by the tables.

SQLite returns naive datetimes and PostgreSQL timezone-aware ones; every
datetime passes through :class:`UTCDateTime` so the rest of the code only
ever sees timezone-aware UTC values.
"""

from __future__ import annotations

from datetime import datetime, timezone

from sqlalchemy import DateTime, LargeBinary, Text
from sqlalchemy.types import TypeDecorator


def utcnow() -> datetime:
    """Current time, timezone-aware UTC (from the registry clock, see registry.clock)."""
    from ..clock import now

    return now()


def as_utc(value: datetime | None) -> datetime | None:
    """Interpret naive datetimes as UTC and convert aware ones to UTC."""
    if value is None:
        return None
    if value.tzinfo is None:
        return value.replace(tzinfo=timezone.utc)
    return value.astimezone(timezone.utc)


class UTCDateTime(TypeDecorator):
    """A DateTime column that always stores and returns UTC."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value, dialect):
        value = as_utc(value)
        if value is not None and dialect.name == "sqlite":
            # SQLite has no time zone type: store naive UTC text so ordering works.
            return value.replace(tzinfo=None)
        return value

    def process_result_value(self, value, dialect):
        return as_utc(value)


# Large payloads: LargeBinary is BLOB on SQLite and BYTEA on PostgreSQL.
Blob = LargeBinary
LongText = Text
