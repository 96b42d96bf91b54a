"""What makes a model due, and how `due` lists it (UTC and each site's zone).

Sources: the revalidation requirements stated beside each check; time-zone offsets from the
IANA tz database rules (from memory: Portugal keeps EU summer time, UTC+1 from the
last Sunday of March to the last Sunday of October, else UTC+0; Chicago keeps US
daylight time, UTC−5 from the second Sunday of March to the first Sunday of November,
else UTC−6).
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest
from sqlmodel import select

from registry.errors import InputError, PermissionDenied, StateError
from registry.services import admin, models, predictions, revalidation
from registry.storage.engine import session_scope
from registry.storage.models import ModelVersion, RevalidationTrigger
from seed_demo.synthetic import generate_population
from tests.factories import write_population_csv
from tests.lifecycle_services import steps

UTC = timezone.utc


def _open(reg, kind):
    with session_scope(reg.engine) as s:
        return s.exec(select(RevalidationTrigger).where(RevalidationTrigger.kind == kind,
                                                        RevalidationTrigger.cleared_at == None)).all()  # noqa: E711


def _due(reg, **kw):
    with session_scope(reg.engine) as s:
        return revalidation.due_list(s, reg.actors["auditor"], **kw)


def _set_last_validated(reg, label, when):
    # Test set-up only: place the last validation at a fixed instant.
    with session_scope(reg.engine) as s:
        mv = s.exec(select(ModelVersion).where(ModelVersion.label == label)).one()
        mv.last_validated_at = when
        s.add(mv)


@pytest.mark.parametrize("interval, lisbon, chicago", [
    # 2027-01-15 12:00 UTC + 180 d = 2027-07-14 12:00 UTC: summer time at both sites.
    (180, "2027-07-14 13:00 +0100", "2027-07-14 07:00 -0500"),
    # + 300 d = 2027-11-11 12:00 UTC: after both autumn changes (31 Oct and 7 Nov 2027).
    (300, "2027-11-11 12:00 +0000", "2027-11-11 06:00 -0600"),
])
def test_due_time_is_shown_in_each_deployment_sites_zone(reg, interval, lisbon, chicago):
    steps.in_service(reg, reg.v1, instrument="IR-100")
    steps.activate(reg, reg.v1, "IR-200")
    _set_last_validated(reg, reg.v1, datetime(2027, 1, 15, 12, tzinfo=UTC))
    with session_scope(reg.engine) as s:
        revalidation.set_policy(s, reg.actors["admin"], "RON", "PREM95", interval)
    due_utc = datetime(2027, 1, 15, 12, tzinfo=UTC) + timedelta(days=interval)
    now = due_utc - timedelta(days=10, hours=12)
    [row] = _due(reg, now=now)
    assert row["due_at"] == due_utc and row["interval_days"] == interval
    assert row["days_left"] == 10 and row["overdue"] is False and row["reasons"] == []
    local = {d["site"]: d["due_at_local"].strftime("%Y-%m-%d %H:%M %z") for d in row["due_at_local"]}
    assert local == {"Harbour Lab": lisbon, "River Lab": chicago}
    assert _due(reg, now=now, within_days=10) and not _due(reg, now=now, within_days=9)
    # Past the due date it is overdue by whole started days.
    [late] = _due(reg, now=due_utc + timedelta(days=2, hours=1))
    assert late["overdue"] and late["days_left"] == -3
    assert "scheduled revalidation" in late["reasons"][0]


def test_overdue_first_then_by_due_date(reg):
    steps.in_service(reg, reg.v1)
    steps.approved(reg, reg.v2, author="dual")
    with session_scope(reg.engine) as s:
        revalidation.raise_trigger(s, reg.actors["reviewer"], reg.v2, "method_change",
                                   "reference lab changed engine")
    rows = _due(reg)
    assert [r["label"] for r in rows] == [reg.v2, reg.v1]
    assert rows[0]["overdue"] and rows[0]["days_left"] <= 0 and not rows[1]["overdue"]
    assert rows[0]["due_at_local"] == []  # approved, not deployed anywhere: UTC only
    assert rows[1]["days_left"] in (364, 365)  # default policy: 365 days (yearly; common practice)


def test_manual_trigger_needs_a_known_kind_and_a_model_in_service(reg):
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="unknown trigger kind"):
        revalidation.raise_trigger(s, reg.actors["reviewer"], reg.v1, "bogus")
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="validated"):
        revalidation.raise_trigger(s, reg.actors["reviewer"], reg.v1, "method_change")


def test_coverage_drift_of_production_spectra_makes_the_model_due(reg):
    steps.in_service(reg, reg.v1)
    # Production blends with a component the calibration never saw (synthetic generator).
    pop = generate_population(12, family="gasoline", seed=21, new_component_share=0.1)
    csv = reg.tmp / "production.csv"
    write_population_csv(csv, pop, "NEW", "PREM95")
    with session_scope(reg.engine) as s:
        batch = predictions.predict(s, reg.actors["analyst"], reg.v1, files=[csv],
                                    instrument="IR-100")
    outside = [p for p in batch.predictions
               if set(p["flags"]) & set(predictions.SPACE_FLAGS)]
    # Default policy: drift when more than 20 % of ≥ 10 recent predictions are outside.
    assert len(batch.predictions) == 12 and len(outside) / 12 > 0.2
    [trig] = _open(reg, "coverage_drift")
    assert trig.detail["share"] == pytest.approx(len(outside) / 12, abs=1e-4)
    [row] = _due(reg)
    assert row["overdue"] and any("coverage_drift" in r for r in row["reasons"])


def test_instrument_service_makes_due_until_a_passing_revalidation(reg):
    steps.in_service(reg, reg.v1)
    with session_scope(reg.engine) as s:
        admin.record_instrument_event(s, reg.actors["lab_manager"], "IR-100", "service",
                                      "laser replaced")
    [row] = _due(reg)
    assert row["overdue"] and any("instrument_service" in r for r in row["reasons"])
    with session_scope(reg.engine) as s:
        rec = models.validate_model(s, reg.actors["reviewer"], reg.v1, kind="local")
        assert rec.passed
    assert _open(reg, "instrument_service") == []
    assert _due(reg)[0]["overdue"] is False


def test_reference_method_change_makes_models_due_but_cost_does_not(reg):
    steps.in_service(reg, reg.v1)
    with session_scope(reg.engine) as s:
        revalidation.edit_method(s, reg.actors["admin"], "ASTM D2699", "RON", cost=300.0,
                                 turnaround_days=3)
    assert _open(reg, "method_change") == []
    with session_scope(reg.engine) as s, pytest.raises(PermissionDenied):
        revalidation.edit_method(s, reg.actors["lab_manager"], "ASTM D2699", "RON", cost=1.0)
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="≥ 0"):
        revalidation.edit_method(s, reg.actors["admin"], "ASTM D2699", "RON", reproducibility=-1)
    with session_scope(reg.engine) as s:
        m = revalidation.edit_method(s, reg.actors["admin"], "ASTM D2699", "RON",
                                     reproducibility={"kind": "constant", "value": 0.8})
        assert m.reproducibility == {"kind": "constant", "value": 0.8} and m.cost == 300.0
    [trig] = _open(reg, "method_change")
    assert trig.detail["changed"] == ["reproducibility"]
    [row] = _due(reg)
    assert row["overdue"] and any("method_change" in r for r in row["reasons"])
    with session_scope(reg.engine) as s:
        # withdrawn by a lab manager (may raise triggers, so may withdraw one, with a reason)
        revalidation.clear_trigger(s, reg.actors["lab_manager"], trig.id, "precision typo fixed")
    assert _due(reg)[0]["overdue"] is False


def test_policy_edit_checks_input(reg):
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="interval"):
        revalidation.set_policy(s, reg.actors["admin"], "RON", None, 0)
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="threshold"):
        revalidation.set_policy(s, reg.actors["admin"], "RON", None, coverage_threshold=1.5)
    with session_scope(reg.engine) as s:
        revalidation.set_policy(s, reg.actors["admin"], "RON", None, 90)
        revalidation.set_policy(s, reg.actors["admin"], "RON", None, coverage_min_count=5)
        [p] = revalidation.list_policies(s, reg.actors["auditor"])
    assert (p["interval_days"], p["coverage_min_count"], p["grade"]) == (90, 5, None)
