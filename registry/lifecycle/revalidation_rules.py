"""When a model version in service is due for revalidation (the rules; no database).

The rows these rules read and write (policies, triggers) are handled by
:mod:`registry.storage.revalidation_store`; the user actions (due list,
policies, raising and clearing triggers) are in :mod:`registry.services.revalidation`.

A model in use is revalidated on a schedule and, sooner, whenever something
happens that may have moved it off its validated state (ongoing validation in
the sense of ASTM D6122): a QC signal, predictions drifting out of the
calibration space, instrument service, or a change of the reference method.

Time handling: every instant is stored and computed in UTC (timezone-aware
``datetime``); a site's local zone is only for display (:func:`to_site_time`).
An interval of N days is N × 24 h of elapsed time, so across a daylight-saving
change the due time shown in the site's zone moves by the DST offset (an hour)
while the elapsed time stays exact.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from enum import StrEnum
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np

from registry.errors import InputError
from registry.lifecycle.states import IN_SERVICE_STATES, ModelState

_DAY = timedelta(days=1)

#: Revalidation interval when no policy is set for the property (common practice: yearly).
DEFAULT_INTERVAL_DAYS = 365

#: Instrument events after which every model active on the instrument is due at once
#: (a requalification is itself the check, so it raises nothing).
SERVICE_EVENT_KINDS: frozenset[str] = frozenset({"service", "repair", "relocation"})


class TriggerKind(StrEnum):
    """Events that make a revalidation due at once."""

    QC_SIGNAL = "qc_signal"
    COVERAGE_DRIFT = "coverage_drift"
    INSTRUMENT_SERVICE = "instrument_service"
    METHOD_CHANGE = "method_change"
    #: a property whose results a derived version combines got a new version in service
    INPUT_CHANGE = "input_change"


@dataclass(frozen=True)
class Trigger:
    """An open revalidation trigger; ``detail`` says what happened, for the reasons list;
    ``raised_at`` (UTC) is when, so an overdue version can say for how long."""

    kind: TriggerKind
    detail: str = ""
    raised_at: datetime | None = None


@dataclass(frozen=True)
class DueStatus:
    """Revalidation status at one instant.

    Attributes
    ----------
    due_at : datetime
        When revalidation is due (UTC): the scheduled date, or ``now`` if an
        open trigger made it due earlier.
    days_left : int
        Whole days until ``due_at``, rounded down: 0 means due within a day,
        negative means overdue by that many (started) days.
    overdue : bool
        True once ``now`` has reached ``due_at``.
    reasons : list of str
        Why it is due (empty when it is not yet due).
    scheduled_at : datetime or None
        The scheduled date alone (``interval_days`` after the last validation), triggers
        aside: where the version sits on a timeline of due dates.
    overdue_since : datetime or None
        While overdue, the instant it became due: the scheduled date if that has passed,
        or the earliest open trigger's raising, whichever came first (``now`` for a
        trigger whose time is not known). None when not overdue.
    """

    due_at: datetime
    days_left: int
    overdue: bool
    reasons: list[str] = field(default_factory=list)
    scheduled_at: datetime | None = None
    overdue_since: datetime | None = None


def _require_aware(dt: datetime, name: str) -> datetime:
    if not isinstance(dt, datetime):
        raise InputError(f"{name} must be a datetime, got {type(dt).__name__}", field=name)
    if dt.tzinfo is None or dt.utcoffset() is None:
        raise InputError(f"{name} has no time zone; registry times are timezone-aware UTC",
                         field=name)
    return dt.astimezone(timezone.utc)


def due_date(last_validated_at: datetime, interval_days: int) -> datetime:
    """Scheduled revalidation instant: ``interval_days`` × 24 h after the last validation (UTC)."""
    last = _require_aware(last_validated_at, "last_validated_at")
    if isinstance(interval_days, bool) or not isinstance(interval_days, (int, np.integer)) \
            or interval_days < 1:
        raise InputError(f"revalidation interval must be a whole number of days ≥ 1, "
                         f"got {interval_days!r}", field="interval_days")
    return last + timedelta(days=int(interval_days))


def _as_trigger(trigger: Trigger | TriggerKind | str) -> Trigger:
    kind, detail, raised_at = ((trigger.kind, trigger.detail, trigger.raised_at)
                               if isinstance(trigger, Trigger) else (trigger, "", None))
    if raised_at is not None:
        raised_at = _require_aware(raised_at, "raised_at")
    try:
        return Trigger(TriggerKind(kind), detail, raised_at)
    except ValueError:
        raise InputError(f"unknown revalidation trigger {kind!r}; known: "
                         + ", ".join(k.value for k in TriggerKind), field="triggers") from None


def due_status(now: datetime, due_at: datetime,
               triggers: Iterable[Trigger | TriggerKind | str] = ()) -> DueStatus:
    """Whether revalidation is due at ``now``.

    Parameters
    ----------
    now, due_at : datetime
        Timezone-aware; compared in UTC.
    triggers : iterable of Trigger, TriggerKind or str
        The *open* triggers of the version (the caller filters closed ones).
        Any open trigger makes revalidation due at once.

    Returns
    -------
    DueStatus
    """
    now = _require_aware(now, "now")
    scheduled = _require_aware(due_at, "due_at")
    open_triggers = [_as_trigger(t) for t in triggers]
    reasons = []
    effective = scheduled
    if now >= scheduled:
        reasons.append(f"scheduled revalidation was due {scheduled.isoformat()}")
    for trig in open_triggers:
        reasons.append(f"open trigger: {trig.kind.value}" + (f" ({trig.detail})" if trig.detail else ""))
    if open_triggers:
        effective = min(scheduled, now)
    days_left = (effective - now) // _DAY  # floor division of timedeltas: exact integer
    overdue = now >= effective
    since = None
    if overdue:  # from the earliest cause: the passed schedule or a trigger's raising
        causes = [scheduled] if now >= scheduled else []
        causes += [min(t.raised_at or now, now) for t in open_triggers]
        since = min(causes)
    return DueStatus(due_at=effective, days_left=days_left, overdue=overdue, reasons=reasons,
                     scheduled_at=scheduled, overdue_since=since)


def cleared_by_revalidation(kind: TriggerKind | str) -> bool:
    """Whether a passing revalidation answers an open trigger of this kind.

    A QC signal is not answered that way: a reviewer clears it once its cause is found.
    """
    return TriggerKind(kind) is not TriggerKind.QC_SIGNAL


def model_due_status(state: ModelState | str, last_validated_at: datetime | None,
                     interval_days: int, open_triggers: Iterable[Trigger | TriggerKind | str],
                     now: datetime) -> DueStatus | None:
    """Revalidation status of one model version at ``now``.

    Parameters
    ----------
    state : ModelState
        The version's state; only versions in service (approved, active) fall due.
    last_validated_at : datetime or None
        Its last passing validation (timezone-aware).
    interval_days : int
        The policy's interval for its property and grade.
    open_triggers : iterable of Trigger, TriggerKind or str
        Its triggers not cleared yet.
    now : datetime
        Timezone-aware instant to judge at.

    Returns
    -------
    DueStatus or None
        None for a version not in service or never validated.
    """
    if ModelState(state) not in IN_SERVICE_STATES or last_validated_at is None:
        return None
    return due_status(now, due_date(last_validated_at, interval_days), open_triggers)


def coverage_drift(outside_flags_in_window, threshold: float = 0.2,
                   min_count: int = 10) -> tuple[bool, float]:
    """Whether too many recent predictions fell outside the calibration space.

    Parameters
    ----------
    outside_flags_in_window : array_like of bool
        One flag per prediction in the look-back window: True if it was flagged
        as outside the model's space (leverage, residual or nearest-neighbour).
    threshold : float
        Drift when the flagged share is strictly above this (default 0.2; a
        project policy value, not a published one).
    min_count : int
        No verdict on fewer predictions than this (default 10), so one early
        flagged result cannot trigger revalidation.

    Returns
    -------
    drifted : bool
    share : float
        Flagged share of the window; NaN for an empty window.
    """
    flags = np.asarray(outside_flags_in_window)
    if flags.ndim != 1:
        raise InputError(f"flags must be a 1-D sequence, got shape {flags.shape}",
                         field="outside_flags_in_window")
    if flags.size and flags.dtype != bool:
        if not np.isin(flags, (0, 1)).all():
            raise InputError("flags must be true/false", field="outside_flags_in_window")
        flags = flags.astype(bool)
    threshold = float(threshold)
    if not (0.0 <= threshold < 1.0):
        raise InputError(f"threshold must be in [0, 1), got {threshold}", field="threshold")
    if isinstance(min_count, bool) or not isinstance(min_count, (int, np.integer)) or min_count < 1:
        raise InputError(f"min_count must be a whole number ≥ 1, got {min_count!r}",
                         field="min_count")
    if flags.size == 0:
        return False, float("nan")
    share = float(np.count_nonzero(flags)) / flags.size
    return bool(flags.size >= min_count and share > threshold), share


def to_site_time(dt_utc: datetime, tz_name: str) -> datetime:
    """Show a stored UTC instant in a site's time zone (IANA name, e.g. ``"Europe/Berlin"``)."""
    dt = _require_aware(dt_utc, "dt_utc")
    try:
        zone = ZoneInfo(tz_name)
    except (ZoneInfoNotFoundError, ValueError, TypeError):
        raise InputError(f"unknown time zone {tz_name!r}; use an IANA name such as "
                         "'Europe/Berlin'", field="time_zone") from None
    return dt.astimezone(zone)
