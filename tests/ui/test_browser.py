"""The app in a real browser: each role signs in and does one job from start to end.

Headless Chromium (Debian's package) driven by Playwright against ``streamlit run
ui/app.py`` started from another directory than the repository root. The reviewer
approves a version waiting for review, the lab manager stores a send list, the auditor
downloads a trace, the analyst imports a file; no page may show an exception, and the
framework's deploy button and developer menu stay hidden. Screenshots go to
tests/artifacts/ (not versioned); page-switch times are written there too and printed.

Under CI a missing Chromium or Playwright is a failure, never a skip.
"""

from __future__ import annotations

import json
import os
import statistics
from pathlib import Path

import pytest

from registry.services import intake, lifecycle, models, selection_runs, views
from registry.storage.engine import make_engine, session_scope
from seed_demo.synthetic import generate_population
from tests.conftest import PASSWORD, ROLE_USERS
from tests.factories import copy_sqlite, trained_ron_version, write_population_csv
from tests.ui import browser

pytestmark = pytest.mark.slow


def _need(what: str, present: bool) -> None:
    if present:
        return
    if os.environ.get("CI"):
        pytest.fail(f"{what} is missing: CI installs it (.ci/run, pyproject's test extra)")
    pytest.skip(f"{what} is missing")


try:
    from playwright.sync_api import expect, sync_playwright
except ImportError:  # pragma: no cover - depends on the machine
    sync_playwright = None


@pytest.fixture(scope="module")
def served(ui_built, tmp_path_factory):
    """The UI registry plus a second version waiting for review, served by the real app."""
    _need("the Python playwright package", sync_playwright is not None)
    _need("Debian's chromium", browser.chromium() is not None)
    base = tmp_path_factory.mktemp("browser")
    db = base / "registry.db"
    copy_sqlite(ui_built["path"], db)
    url = f"sqlite:///{db}"
    engine = make_engine(url)
    actors = ui_built["actors"]
    label = trained_ron_version(engine, actors, set_name="RON-A", new_set=False)
    with session_scope(engine) as s:
        models.validate_model(s, actors["reviewer"], label)
    with session_scope(engine) as s:
        lifecycle.submit_model(s, actors["analyst"], label, "second version, ready for review")
    engine.dispose()
    browser.ARTIFACTS.mkdir(parents=True, exist_ok=True)
    workdir = base / "elsewhere"  # not the repository root: its config file must not matter
    workdir.mkdir()
    with browser.app_server(url, workdir, log=browser.ARTIFACTS / "browser-server.log") as app_url:
        with sync_playwright() as pw:
            chromium = browser.launch(pw)
            yield {"url": app_url, "db_url": url, "label": label, "actors": actors,
                   "browser": chromium, "work": base}
            chromium.close()


def service(served, fn, *args, role="auditor", **kw):
    engine = make_engine(served["db_url"])
    try:
        with session_scope(engine) as s:
            return fn(s, served["actors"][role], *args, **kw)
    finally:
        engine.dispose()


def session_as(served, role):
    """A fresh browser session signed in as the test user of ``role``."""
    context = served["browser"].new_context(viewport={"width": 1400, "height": 1000},
                                            accept_downloads=True)
    page = context.new_page()
    page.set_default_timeout(60_000)
    browser.sign_in(page, served["url"], ROLE_USERS[role], PASSWORD)
    return context, page


def shot(page, name: str, locator=None) -> None:
    if locator is not None:
        locator.scroll_into_view_if_needed()
    page.screenshot(path=str(browser.ARTIFACTS / f"{name}.png"))


def form_with(page, button: str):
    return page.get_by_test_id("stForm").filter(has=page.get_by_role("button", name=button))


def test_the_first_page_of_a_fresh_server_hides_the_framework_menus(served):
    # the first test against a server just started: the very first run sets the toolbar mode
    context = served["browser"].new_context()
    page = context.new_page()
    page.goto(served["url"])
    expect(page.get_by_label("User name")).to_be_visible(timeout=60_000)
    browser.wait_idle(page)
    assert browser.toolbar_items(page) == {"deploy": 0, "menu": 0}
    assert browser.problems_on(page) == []
    context.close()


def test_reviewer_approves_the_version_waiting_for_review(served):
    context, page = session_as(served, "reviewer")
    assert browser.toolbar_items(page) == {"deploy": 0, "menu": 0}
    titles = dict(browser.pages())
    browser.switch(page, "Models", titles["Models"])
    expect(page.get_by_text(f"{served['label']}: RON (in_review)")).to_be_visible()
    form = form_with(page, "Sign: approve")
    form.get_by_label("Reason").fill("validation passed; evidence checked")
    form.get_by_label("Password", exact=True).fill(PASSWORD)
    form.get_by_role("button", name="Sign: approve").click()
    expect(page.get_by_text(f"{served['label']}: approve signed")).to_be_visible()
    browser.wait_idle(page)
    assert browser.problems_on(page) == []
    shot(page, "reviewer-approved")
    assert service(served, models.model_detail, served["label"])["state"] == "approved"
    context.close()


def test_lab_manager_stores_a_send_list(served):
    context, page = session_as(served, "lab_manager")
    titles = dict(browser.pages())
    browser.switch(page, "Send list", titles["Send list"])
    page.get_by_role("button", name="Choose samples").click()
    done = page.get_by_text("stored as run")
    expect(done).to_be_visible()
    browser.wait_idle(page)
    assert browser.problems_on(page) == []
    shot(page, "lab-manager-send-list", done)
    runs = service(served, selection_runs.list_runs, role="lab_manager")
    assert len(runs) == 1
    expect(page.get_by_role("button", name="Download send list (CSV)")).to_be_visible()
    context.close()


def test_auditor_downloads_a_trace_and_pages_switch_quickly(served):
    context, page = session_as(served, "auditor")
    assert browser.toolbar_items(page) == {"deploy": 0, "menu": 0}
    titles = dict(browser.pages())
    browser.switch(page, "Trace", titles["Trace"])
    page.get_by_role("button", name="Trace", exact=True).click()
    button = page.get_by_role("button", name="Trace as JSON")
    expect(button).to_be_visible()
    browser.wait_idle(page)
    with page.expect_download() as got:
        button.click()
    doc = json.loads(Path(got.value.path()).read_text())
    newest = service(served, views.latest_prediction_id)
    expected = service(served, views.trace_documents, newest)["document"]
    assert doc["prediction"] == json.loads(json.dumps(expected["prediction"], default=str))
    assert doc["model"]["label"] == expected["model"]["label"]
    with page.expect_download() as got_html:
        page.get_by_role("button", name="Trace as HTML").click()
    assert Path(got_html.value.path()).read_text().startswith("<!DOCTYPE html>")
    assert page.locator(".trace-tree details").count() > 0  # the lineage folds
    assert browser.problems_on(page) == []
    shot(page, "auditor-trace", page.locator(".trace-tree"))

    # training is the analyst's: the auditor's navigation does not offer it
    assert page.get_by_test_id("stSidebarNav").get_by_role("link", name="Train", exact=True).count() == 0
    times = browser.page_switch_times(page, rounds=2)
    assert browser.problems_on(page) == []
    assert browser.toolbar_items(page) == {"deploy": 0, "menu": 0}
    reference = browser.health_round_trip(served["url"])
    repeat = [t[-1] for t in times.values()]
    report = {"health_round_trip_s": round(reference, 4),
              "median_switch_s": round(statistics.median(repeat), 3),
              "slowest_switch_s": round(max(repeat), 3),
              "first_visit_s": {k: round(v[0], 3) for k, v in times.items()},
              "repeat_visit_s": {k: round(v[-1], 3) for k, v in times.items()}}
    (browser.ARTIFACTS / "browser-page-switch.json").write_text(json.dumps(report, indent=2))
    print(f"\npage switch (test registry): median {report['median_switch_s']} s, slowest "
          f"{report['slowest_switch_s']} s; health round trip {reference * 1000:.1f} ms")
    context.close()


def test_analyst_imports_a_file_and_sees_the_spectra(served):
    path = served["work"] / "bench-week-12.csv"
    ids = write_population_csv(path, generate_population(3, family="gasoline", seed=77), "WK12",
                               "PREM95")
    context, page = session_as(served, "analyst")
    titles = dict(browser.pages())
    browser.switch(page, "Import", titles["Import"])
    page.get_by_test_id("stFileUploaderDropzoneInput").first.set_input_files(str(path))
    expect(page.get_by_text(path.name).first).to_be_visible()
    page.get_by_role("button", name="Import spectra").click()
    expect(page.get_by_text("3 spectra imported")).to_be_visible()
    browser.wait_idle(page)
    plot = page.get_by_test_id("stPlotlyChart")
    expect(plot).to_be_visible()
    assert browser.problems_on(page) == []
    shot(page, "analyst-import", plot)
    assert len(service(served, intake.spectra_of_samples, ids, role="analyst")) == 3
    # the analyst's navigation offers training, and the page opens without a problem
    browser.switch(page, "Train", titles["Train"])
    assert browser.problems_on(page) == []
    context.close()
