"""Overview and Due: the active-deployment count, how long a version has been overdue, and
the timeline of due dates.

References: the lifecycle's own rule that activating a version on an instrument supersedes
the one deployed there (registry/lifecycle/states.py), and the due-date arithmetic of
registry/lifecycle/revalidation_rules.py (its own tests check it against numpy's calendar).
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

from registry.clock import frozen_at
from registry.services import lifecycle, models, revalidation
from registry.services.status import registry_status
from registry.storage.engine import make_engine, session_scope
from tests.conftest import PASSWORD
from tests.factories import into_service, trained_ron_version
from tests.ui.helpers import frame, open_page, plotly_specs, signed_in


def _due(reg):
    engine = make_engine(reg.url)
    try:
        with session_scope(engine) as s:
            return revalidation.due_list(s, reg.actors["auditor"])
    finally:
        engine.dispose()


def _metric(at, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def test_active_deployments_leave_out_the_superseded_one(ui_reg):
    engine = make_engine(ui_reg.url)
    a = ui_reg.actors
    v2 = trained_ron_version(engine, a, new_set=False)
    into_service(engine, a, v2, reason="replaces v1")
    with session_scope(engine) as s:
        status = registry_status(s, ui_reg.url)
        assert models.model_detail(s, a["auditor"], ui_reg.label)["state"] == "superseded"
    engine.dispose()
    # two deployment rows on IR-100, of which one (v2's) is active
    assert status["counts"]["deployments"] == 2 and status["in_service"]["active_deployments"] == 1
    at = signed_in("auditor")  # lands on the Overview
    assert _metric(at, "Active deployments") == "1"


def test_a_retired_deployment_is_not_counted_active(ui_reg):
    at = signed_in("auditor")
    assert _metric(at, "Active deployments") == "1"
    engine = make_engine(ui_reg.url)
    with session_scope(engine) as s:
        lifecycle.retire_model(s, ui_reg.actors["lab_manager"], ui_reg.label, password=PASSWORD,
                               reason="method withdrawn")
    engine.dispose()
    at = open_page(at, "overview")
    assert _metric(at, "Active deployments") == "0"


def test_an_overdue_version_says_for_how_long_from_its_trigger(ui_reg):
    raised = datetime.now(timezone.utc) - timedelta(days=10, hours=2)
    engine = make_engine(ui_reg.url)
    with frozen_at(raised), session_scope(engine) as s:
        revalidation.raise_trigger(s, ui_reg.actors["reviewer"], ui_reg.label, "method_change",
                                   "reference engine rebuilt")
    engine.dispose()
    [row] = _due(ui_reg)
    assert row["overdue"] and row["overdue_since"] == raised
    assert 10 < row["overdue_days"] < 10.2  # 10 days 2 hours, counted from the trigger
    expected = f"overdue 10 days (since {raised:%Y-%m-%d %H:%M} UTC, a trigger was raised)"
    for page, role in (("due", "reviewer"), ("overview", "lab_manager")):
        at = open_page(signed_in(role), page)
        assert not at.exception and not at.error
        assert frame(at, "status")["status"].tolist() == [expected], page
        assert "due now" not in frame(at, "status").to_string()


def test_timeline_has_a_row_per_version_and_today_marked(ui_reg):
    at = open_page(signed_in("analyst"), "due")
    [row] = _due(ui_reg)
    assert frame(at, "status")["status"].iloc[0] == f"due in {row['days_left']} days"
    [timeline] = plotly_specs(at)
    layout = timeline["layout"]
    assert layout["yaxis"]["categoryarray"] == [row["label"]]
    traces = {t["name"]: t for t in timeline["data"]}
    due = traces["scheduled due date"]
    assert due["y"] == [row["label"]]
    assert due["x"][0].startswith(f"{row['scheduled_at']:%Y-%m-%dT%H:%M}")
    [today] = [sh for sh in layout["shapes"] if sh["name"] == "today"]
    assert today["x0"][:10] == f"{datetime.now(timezone.utc):%Y-%m-%d}" and today["yref"] == "paper"
    assert "today (dotted line)" in traces and "overdue" not in traces
    assert layout["xaxis"]["title"]["text"] == "date (UTC)"
