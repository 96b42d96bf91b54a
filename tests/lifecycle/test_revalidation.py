"""Revalidation dates across month ends, leap years, DST changes and time zones."""

import calendar
import math
from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from registry.errors import InputError
from registry.lifecycle.revalidation_rules import (
    Trigger,
    TriggerKind,
    cleared_by_revalidation,
    coverage_drift,
    due_date,
    due_status,
    model_due_status,
    to_site_time,
)
from registry.lifecycle.states import ModelState

UTC = timezone.utc


def _numpy_due(start: datetime, days: int) -> datetime:
    """Independent calendar arithmetic: numpy datetime64 in seconds."""
    stamp = np.datetime64(start.replace(tzinfo=None), "s") + np.timedelta64(days, "D")
    return datetime.fromisoformat(str(stamp)).replace(tzinfo=UTC)


@pytest.mark.parametrize("start,days", [
    ("2028-02-29T08:00:00", 365),   # leap day + 365 days
    ("2028-02-28T08:00:00", 1),     # into the leap day
    ("2027-02-28T23:30:00", 365),   # a year spanning 29 Feb 2028
    ("2026-01-31T12:00:00", 30),    # month end, February has 28 days in 2026
    ("2028-01-31T12:00:00", 30),    # same in a leap year
    ("2026-12-31T23:59:59", 1),     # year end
    ("2026-03-28T12:00:00", 2),     # across the EU spring DST change (no effect in UTC)
    ("2100-02-28T00:00:00", 1),     # 2100 is not a leap year (Gregorian century rule)
])
def test_due_date_matches_calendar_arithmetic(start, days):
    begin = datetime.fromisoformat(start).replace(tzinfo=UTC)
    assert due_date(begin, days) == _numpy_due(begin, days)


def test_leap_year_facts():
    # Gregorian calendar: 2028 is a leap year, 2100 is not
    assert calendar.isleap(2028) and not calendar.isleap(2100)
    leap = due_date(datetime(2028, 2, 29, 8, tzinfo=UTC), 365)
    assert (leap.month, leap.day) == (2, 28) and leap.year == 2029
    assert due_date(datetime(2100, 2, 28, tzinfo=UTC), 1).day == 1  # 1 March 2100


def test_due_date_is_returned_in_utc_for_any_input_zone():
    berlin = datetime(2026, 3, 28, 12, 0, tzinfo=ZoneInfo("Europe/Berlin"))  # 11:00 UTC, CET
    due = due_date(berlin, 2)
    assert due.utcoffset() == timedelta(0)
    # exactly 48 h elapsed although Berlin moved its clocks in between
    assert due.timestamp() - berlin.timestamp() == 48 * 3600


def test_due_date_refuses_naive_times_and_bad_intervals():
    with pytest.raises(InputError) as info:
        due_date(datetime(2026, 1, 1), 30)
    assert info.value.field == "last_validated_at"
    for bad in (0, -5, 2.5, True):
        with pytest.raises(InputError):
            due_date(datetime(2026, 1, 1, tzinfo=UTC), bad)


# --- due_status (requirement: any open trigger makes revalidation due now)

DUE = datetime(2026, 6, 30, 12, 0, tzinfo=UTC)


def test_not_yet_due():
    status = due_status(DUE - timedelta(days=10, hours=1), DUE, [])
    assert (status.days_left, status.overdue, status.reasons) == (10, False, [])
    assert status.due_at == DUE


def test_due_at_the_instant_and_overdue_after():
    assert due_status(DUE, DUE).overdue and due_status(DUE, DUE).days_left == 0
    late = due_status(DUE + timedelta(hours=1), DUE)
    assert late.overdue and late.days_left == -1
    assert late.reasons == ["scheduled revalidation was due 2026-06-30T12:00:00+00:00"]
    assert due_status(DUE - timedelta(hours=23), DUE).days_left == 0   # due within a day


@pytest.mark.parametrize("kind", list(TriggerKind))
def test_any_open_trigger_makes_it_due_now(kind):
    now = DUE - timedelta(days=40)
    status = due_status(now, DUE, [kind.value])
    assert status.overdue and status.due_at == now and status.days_left == 0
    assert status.reasons == [f"open trigger: {kind.value}"]


def test_trigger_detail_and_earlier_schedule_are_kept():
    now = DUE + timedelta(days=3)
    status = due_status(now, DUE, [Trigger(TriggerKind.QC_SIGNAL, "rule 1 on RON check fuel")])
    assert status.due_at == DUE and status.days_left == -3
    assert status.reasons[1] == "open trigger: qc_signal (rule 1 on RON check fuel)"


def test_overdue_since_counts_from_the_earliest_cause():
    # Arithmetic on the dates themselves (no outside source needed): an overdue version is
    # late since its passed schedule or since its earliest open trigger was raised.
    raised = DUE - timedelta(days=12)
    now = DUE - timedelta(days=2)
    status = due_status(now, DUE, [Trigger(TriggerKind.QC_SIGNAL, "", raised),
                                   Trigger(TriggerKind.METHOD_CHANGE, "", raised + timedelta(days=5))])
    assert status.overdue and status.overdue_since == raised and status.scheduled_at == DUE
    late = due_status(DUE + timedelta(days=4), DUE, [Trigger(TriggerKind.QC_SIGNAL, "",
                                                             DUE + timedelta(days=1))])
    assert late.overdue_since == DUE  # the schedule passed before the trigger came
    assert due_status(now, DUE, [TriggerKind.QC_SIGNAL]).overdue_since == now  # time unknown
    assert due_status(now, DUE).overdue_since is None  # not overdue


def test_unknown_trigger_is_refused():
    with pytest.raises(InputError) as info:
        due_status(DUE, DUE, ["sunspots"])
    assert info.value.field == "triggers"
    with pytest.raises(InputError):
        due_status(DUE, DUE, [Trigger("sunspots", "stored kind no longer known")])


# --- coverage drift

def test_coverage_drift():
    # share = flagged / total, checked against numpy's mean; threshold is strict
    flags = [True] * 3 + [False] * 7
    assert coverage_drift(flags) == (True, float(np.mean(flags)))
    assert coverage_drift([True] * 2 + [False] * 8) == (False, 0.2)
    # too few predictions for a verdict, however many are flagged
    assert coverage_drift([True] * 9) == (False, 1.0)
    assert coverage_drift([True] * 9, min_count=5) == (True, 1.0)
    drifted, share = coverage_drift([])
    assert drifted is False and math.isnan(share)


def test_coverage_drift_refuses_non_flags():
    with pytest.raises(InputError):
        coverage_drift([0.3, 0.9])
    with pytest.raises(InputError):
        coverage_drift([True] * 10, threshold=1.5)


# --- site time (stored UTC, shown in the site's zone)

def _last_sunday(year: int, month: int) -> int:
    return max(week[calendar.SUNDAY] for week in calendar.monthcalendar(year, month))


def test_eu_dst_changes():
    # EU Directive 2000/84/EC: summer time from 01:00 UTC on the last Sunday of March
    # to 01:00 UTC on the last Sunday of October
    spring = datetime(2026, 3, _last_sunday(2026, 3), 1, 0, tzinfo=UTC)
    before = to_site_time(spring - timedelta(seconds=1), "Europe/Berlin")
    after = to_site_time(spring, "Europe/Berlin")
    assert (before.hour, before.minute, before.utcoffset()) == (1, 59, timedelta(hours=1))
    assert (after.hour, after.utcoffset()) == (3, timedelta(hours=2))

    autumn = datetime(2026, 10, _last_sunday(2026, 10), 1, 0, tzinfo=UTC)
    first = to_site_time(autumn - timedelta(minutes=30), "Europe/Berlin")
    second = to_site_time(autumn + timedelta(minutes=30), "Europe/Berlin")
    # the same wall-clock time 02:30 occurs twice; the instants stay distinct (PEP 495 fold)
    assert (first.hour, first.minute, first.fold) == (2, 30, 0)
    assert (second.hour, second.minute, second.fold) == (2, 30, 1)
    assert second.timestamp() - first.timestamp() == 3600


def test_us_and_southern_hemisphere_and_fractional_zones():
    # US Energy Policy Act 2005: DST from 02:00 local on the second Sunday of March
    second_sunday = [w[calendar.SUNDAY] for w in calendar.monthcalendar(2026, 3)
                     if w[calendar.SUNDAY]][1]
    ny = to_site_time(datetime(2026, 3, second_sunday, 7, 0, tzinfo=UTC), "America/New_York")
    assert (ny.hour, ny.utcoffset()) == (3, timedelta(hours=-4))
    # Sydney is on summer time in January (AEDT, UTC+11); India UTC+5:30; Nepal UTC+5:45
    jan = datetime(2026, 1, 15, 0, 0, tzinfo=UTC)
    assert to_site_time(jan, "Australia/Sydney").utcoffset() == timedelta(hours=11)
    assert to_site_time(jan, "Asia/Kolkata").utcoffset() == timedelta(hours=5, minutes=30)
    assert to_site_time(jan, "Asia/Kathmandu").utcoffset() == timedelta(hours=5, minutes=45)


def test_due_date_shown_across_dst_keeps_elapsed_time():
    # validated 1 March 10:00 UTC = 11:00 CET; 30 days later is 10:00 UTC = 12:00 CEST
    last = datetime(2026, 3, 1, 10, 0, tzinfo=UTC)
    shown = to_site_time(due_date(last, 30), "Europe/Berlin")
    assert (shown.month, shown.day, shown.hour) == (3, 31, 12)
    assert to_site_time(last, "Europe/Berlin").hour == 11


@given(st.datetimes(min_value=datetime(1990, 1, 1), max_value=datetime(2090, 1, 1)),
       st.sampled_from(["Europe/Berlin", "America/New_York", "Australia/Sydney",
                        "Asia/Kolkata", "Pacific/Chatham", "UTC"]))
@settings(max_examples=60, deadline=None)
def test_site_time_is_the_same_instant(naive, zone):
    stored = naive.replace(tzinfo=UTC)
    shown = to_site_time(stored, zone)
    assert shown.astimezone(UTC) == stored
    assert shown.tzinfo.key == zone


def test_unknown_zone_and_naive_input_are_refused():
    with pytest.raises(InputError) as info:
        to_site_time(DUE, "Mars/Olympus_Mons")
    assert info.value.field == "time_zone"
    with pytest.raises(InputError):
        to_site_time(datetime(2026, 1, 1), "Europe/Berlin")


@pytest.mark.parametrize("state", list(ModelState))
def test_only_versions_in_service_fall_due(state):
    # ASTM D6122 (validation of analyzer models in use; from memory): the schedule applies to
    # versions in routine use, i.e. approved or active; a draft or an ended version has none.
    last = datetime(2027, 1, 10, 9, tzinfo=UTC)
    now = last + timedelta(days=400)
    status = model_due_status(state, last, 365, [], now)
    if state in (ModelState.APPROVED, ModelState.ACTIVE):
        assert status == due_status(now, due_date(last, 365))
        assert status.overdue and status.days_left == -35  # 400 - 365 whole days
    else:
        assert status is None


def test_a_version_never_validated_has_no_due_date():
    assert model_due_status(ModelState.ACTIVE, None, 365, [TriggerKind.QC_SIGNAL],
                            datetime(2027, 1, 1, tzinfo=UTC)) is None


def test_an_open_trigger_makes_a_version_in_service_due_now():
    last = datetime(2027, 1, 10, 9, tzinfo=UTC)
    now = last + timedelta(days=30)
    status = model_due_status(ModelState.APPROVED, last, 365,
                              [Trigger(TriggerKind.INSTRUMENT_SERVICE, "IR-100")], now)
    assert status.due_at == now and status.overdue and status.days_left == 0


def test_passing_revalidation_answers_every_trigger_but_a_qc_signal():
    # a QC signal stays until a reviewer has found its cause (ASTM D6299 out-of-control
    # action, from memory)
    assert {k for k in TriggerKind if cleared_by_revalidation(k)} == set(TriggerKind) - {
        TriggerKind.QC_SIGNAL}
