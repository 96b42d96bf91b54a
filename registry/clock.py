"""The registry's clock: UTC now, replaceable for replaying a history.

Everything that stamps a time (rows, audit events, signatures, due dates)
asks :func:`now`. The demo builder replays fourteen months of lab work by
setting the clock step by step with :func:`frozen_at`; nothing else sets it.
"""

from __future__ import annotations

from contextlib import contextmanager
from contextvars import ContextVar
from datetime import datetime, timezone
from typing import Iterator

_override: ContextVar[datetime | None] = ContextVar("specledger_clock", default=None)


def now() -> datetime:
    """Timezone-aware UTC now (or the replay time while one is set)."""
    fixed = _override.get()
    return fixed if fixed is not None else datetime.now(timezone.utc)


@contextmanager
def frozen_at(moment: datetime) -> Iterator[datetime]:
    """Within the block, :func:`now` returns ``moment`` (must be timezone-aware)."""
    if moment.tzinfo is None:
        raise ValueError("the replay clock needs a timezone-aware datetime")
    token = _override.set(moment.astimezone(timezone.utc))
    try:
        yield moment
    finally:
        _override.reset(token)
