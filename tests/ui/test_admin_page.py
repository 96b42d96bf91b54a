"""The admin page under AppTest: users and roles (add, lock, unlock), sites and instruments,
reference methods and costs, acceptance criteria.

Each change made through the page is checked through the services (sign-in, catalog,
property list) and in the audit trail, which must still verify.
"""

from __future__ import annotations

import pytest

from registry.errors import AuthenticationError
from registry.services import audit as audit_svc
from registry.services import properties, views
from registry.services.auth import authenticate
from registry.storage.engine import make_engine, session_scope
from registry.storage.models import AuditEvent
from sqlmodel import select
from tests.ui.helpers import frame, open_page, signed_in


def in_session(reg, fn, *args, role="auditor", **kw):
    engine = make_engine(reg.url)
    try:
        with session_scope(engine) as s:
            return fn(s, *args, **kw) if role is None else fn(s, reg.actors[role], *args, **kw)
    finally:
        engine.dispose()


def last_actions(reg, n: int) -> list[str]:
    def read(s):
        return [e.action for e in s.exec(select(AuditEvent).order_by(AuditEvent.id.desc()).limit(n))]
    return in_session(reg, read, role=None)[::-1]


def submit(at, form: str, label: str):
    return at.form_submit_button(key=f"FormSubmitter:{form}-{label}").click().run()


def test_admin_adds_a_user_who_can_sign_in_then_locks_and_unlocks_the_account(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.text_input(key="adm_user_name").input("nadia")
    at.text_input(key="adm_user_full").input("Nadia Test")
    at.multiselect(key="adm_user_roles").select("analyst").select("reviewer")
    at.text_input(key="adm_user_password").input("a-long-password")
    at.text_input(key="adm_user_password2").input("a-long-password")
    at = submit(at, "adm_user_add", "Add user")
    assert not at.error, [e.value for e in at.error]
    assert any("User nadia added (analyst, reviewer)" in s.value for s in at.success)
    users = frame(at, "roles")
    assert users.set_index("user").loc["nadia", "roles"] == "analyst, reviewer"
    assert at.text_input(key="adm_user_name").value == ""  # the form is empty again
    who = in_session(ui_reg, authenticate, "nadia", "a-long-password", role=None)
    assert who.roles == frozenset({"analyst", "reviewer"})

    at.selectbox(key="adm_lock_user").set_value("nadia")
    at = submit(at, "adm_user_lock", "Lock")
    assert frame(at, "roles").set_index("user").loc["nadia", "status"] == "locked"
    with pytest.raises(AuthenticationError, match="deactivated"):
        in_session(ui_reg, authenticate, "nadia", "a-long-password", role=None)
    at.selectbox(key="adm_lock_user").set_value("nadia")
    at = submit(at, "adm_user_lock", "Unlock")
    assert frame(at, "roles").set_index("user").loc["nadia", "status"] == "may sign in"
    assert in_session(ui_reg, authenticate, "nadia", "a-long-password", role=None).name == "nadia"
    assert last_actions(ui_reg, 3) == ["user_add", "user_deactivate", "user_reactivate"]
    assert in_session(ui_reg, audit_svc.verify_registry).intact


def test_mismatched_passwords_add_nobody(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.text_input(key="adm_user_name").input("olaf")
    at.multiselect(key="adm_user_roles").select("auditor")
    at.text_input(key="adm_user_password").input("a-long-password")
    at.text_input(key="adm_user_password2").input("another-password")
    at = submit(at, "adm_user_add", "Add user")
    assert [e.value for e in at.error] == ["The two passwords differ."]
    assert "olaf" not in [u["name"] for u in in_session(ui_reg, views.users)]


def test_admin_adds_a_site_and_an_instrument_there(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.text_input(key="adm_site_name").input("North Quay Lab")
    at.text_input(key="adm_site_tz").input("Europe/Helsinki")
    at = submit(at, "adm_site_add", "Add site")
    assert not at.error, [e.value for e in at.error]
    at.text_input(key="adm_inst_serial").input("IR-200")
    at.selectbox(key="adm_inst_site").set_value("North Quay Lab")
    at.text_input(key="adm_inst_range").input("4500-600")
    at = submit(at, "adm_instrument_add", "Add instrument")
    assert not at.error, [e.value for e in at.error]
    cat = in_session(ui_reg, views.catalog)
    assert {"name": "North Quay Lab", "timezone": "Europe/Helsinki"} in cat["sites"]
    inst = next(i for i in cat["instruments"] if i["serial"] == "IR-200")
    assert inst["site"] == "North Quay Lab" and inst["range_cm1"] == [600.0, 4500.0]
    assert frame(at, "serial")["serial"].tolist() == ["IR-100", "IR-200"]


def test_a_bad_time_zone_is_refused_in_words_without_option_names(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.text_input(key="adm_site_name").input("Somewhere")
    at.text_input(key="adm_site_tz").input("Mars/Olympus")
    at = submit(at, "adm_site_add", "Add site")
    (error,) = [e.value for e in at.error]
    assert error.startswith("Timezone: unknown time zone 'Mars/Olympus'") and "--" not in error


def test_admin_changes_a_methods_cost_and_r_and_the_change_is_audited(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.selectbox(key="adm_method_pick").set_value(("RON", "ASTM D2699"))
    at.run()
    key = "('RON', 'ASTM D2699')"
    at.number_input(key=f"adm_method_cost_{key}").set_value(275.0)
    at.text_input(key=f"adm_method_r_{key}").input("0.25")
    at = submit(at, "adm_method_edit", "Save method")
    assert not at.error, [e.value for e in at.error]
    method = next(m for m in in_session(ui_reg, views.reference_methods)
                  if (m["property"], m["code"]) == ("RON", "ASTM D2699"))
    assert (method["cost"], method["r"], method["R"]) == (275.0, "0.25", "0.7")
    assert last_actions(ui_reg, 1) == ["method_edit"]
    table = frame(at, "cost per test").set_index("method")
    assert table.loc["ASTM D2699", "cost per test"] == 275.0


def test_admin_overrides_an_acceptance_criterion(ui_reg):
    at = open_page(signed_in("admin"), "admin")
    at.selectbox(key="adm_crit_property").set_value("RON")
    at.run()
    at.text_input(key="adm_crit_RON_min_samples").input("25")
    at = submit(at, "adm_criteria_edit", "Save criteria")
    assert not at.error, [e.value for e in at.error]
    ron = next(p for p in in_session(ui_reg, properties.list_properties) if p["code"] == "RON")
    # the registry's earlier override (tests/factories.accept_small_test_models) stays
    assert ron["overrides"] == {"max_sep_over_sigma_r": 2.5, "min_samples": 25}
    assert ron["acceptance"]["min_samples"] == 25
    at.text_input(key="adm_crit_RON_bias_alpha").input("2")
    at = submit(at, "adm_criteria_edit", "Save criteria")
    assert any("bias_alpha must lie between 0 and 1" in e.value for e in at.error)


@pytest.mark.parametrize("role", ["lab_manager", "analyst", "reviewer", "auditor"])
def test_other_roles_read_the_master_data_and_change_nothing(ui_reg, role):
    at = open_page(signed_in(role), "admin")
    assert not at.exception and not at.error
    assert any("admin's task" in i.value for i in at.info)
    assert not at.form_submit_button
    assert "IR-100" in frame(at, "serial")["serial"].tolist()
    assert "RON" in frame(at, "cost per test")["property"].tolist()
