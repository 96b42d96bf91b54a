"""Column types shared by the tables.

SQLite returns naive datetimes and PostgreSQL timezone-aware ones; every
datetime passes through :class:`UTCDateTime` so the rest of the code only
ever sees timezone-aware UTC values.
"""

from __future__ import annotations

from datetime import datetime, timezone
from enum import StrEnum

from sqlalchemy import CheckConstraint, DateTime, LargeBinary, String, Text
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


class EnumText(TypeDecorator):
    """A closed set of names (a ``StrEnum``) stored as its plain values in a VARCHAR.

    Rows read back as enum members. Plain VARCHAR rather than a native PostgreSQL
    ENUM keeps both engines alike and migrations simple; the table declares
    :func:`enum_check` on the column so the database itself refuses any other text.
    """

    impl = String
    cache_ok = True

    def __init__(self, enum: type[StrEnum], length: int):
        super().__init__(length)
        self.enum = enum

    def process_bind_param(self, value, dialect):
        return None if value is None else self.enum(value).value

    def process_result_value(self, value, dialect):
        return None if value is None else self.enum(value)


def enum_check(column: str, enum: type[StrEnum]) -> CheckConstraint:
    """CHECK that ``column`` holds one of ``enum``'s values (named ``ck_<table>_<column>``)."""
    values = [member.value for member in enum]
    listed = ", ".join(f"'{v}'" for v in values)
    return CheckConstraint(f"{column} IN ({listed})", name=column)


# Large payloads: LargeBinary is BLOB on SQLite and BYTEA on PostgreSQL.
Blob = LargeBinary
LongText = Text
