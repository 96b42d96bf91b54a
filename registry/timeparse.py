"""Parsing user-supplied times: naive values are the site's local time, stored as UTC."""

from __future__ import annotations

from datetime import datetime, timezone
from zoneinfo import ZoneInfo

from .errors import InputError


def parse_time(text: str, tz_name: str = "UTC", *, file: str | None = None,
               line: int | None = None, field: str | None = None) -> datetime:
    """ISO-8601 date or date-time; without an offset it is local time at ``tz_name``."""
    raw = (text or "").strip()
    if not raw:
        raise InputError("a time is required", file=file, line=line, field=field)
    try:
        value = datetime.fromisoformat(raw.replace("Z", "+00:00"))
    except ValueError:
        raise InputError(f"{raw!r} is not an ISO-8601 date or time (e.g. 2027-03-14 or "
                         "2027-03-14T09:30)", file=file, line=line, field=field) from None
    if value.tzinfo is None:
        value = value.replace(tzinfo=ZoneInfo(tz_name))
    return value.astimezone(timezone.utc)
