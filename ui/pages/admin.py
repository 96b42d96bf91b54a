"""Admin: users and roles, sites, instruments and grades, reference methods and costs,
validation acceptance criteria. Everyone sees the tables; only an admin changes them."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from registry.lifecycle.permissions import Action, Role
from registry.services import admin as admin_svc
from registry.services import properties as property_svc
from registry.services import revalidation, views
from ui.common import FAILED, call, field_label, flash, may, require_actor, show_flash, when

require_actor()
st.title("Admin")
st.caption("Master data of the registry. Every change is an audited action of the signed-in admin.")
show_flash()
if not may(Action.USER_ADD):
    st.info("Changing master data is the admin's task; your roles let you read it only.")


def done(message: str, *, clear: tuple[str, ...] = ()) -> None:
    """Keep the message for the next run, empty the named inputs, run the page again."""
    flash(message)
    for key in clear:
        st.session_state.pop(key, None)
    st.rerun()


def typed_number(text: str, what: str) -> tuple[bool, float | None]:
    """(ok, value) of a typed number; blank is (True, None); an error is shown when not ok."""
    text = (text or "").strip()
    if not text:
        return True, None
    try:
        return True, float(text)
    except ValueError:
        st.error(f"{what}: {text!r} is not a number.")
        return False, None


#: Acceptance criteria in words (any other criterion is shown by its own name).
CRITERIA_LABELS = {"bias_alpha": "Bias test significance level α",
                   "min_samples": "Fewest validation samples",
                   "min_samples_per_component": "Validation samples per PLS component",
                   "min_r2": "Smallest R²", "max_abs_bias": "Largest |bias|"}


def criterion(name: str) -> str:
    return CRITERIA_LABELS.get(name) or field_label(name)


tab_users, tab_sites, tab_methods, tab_criteria = st.tabs(
    ["Users and roles", "Sites, instruments and grades", "Reference methods and costs",
     "Acceptance criteria"])

# ---------------------------------------------------------------- users
with tab_users:
    users = call(views.users)
    if users is not FAILED:
        st.dataframe(pd.DataFrame([{
            "user": u["name"], "full name": u["full_name"], "roles": ", ".join(u["roles"]),
            "status": "may sign in" if u["active"] else "locked",
            "added (UTC)": when(u["created_at"])}
            for u in users]), hide_index=True, key="adm_users")
    if may(Action.USER_ADD) and users is not FAILED:
        with st.form("adm_user_add"):
            st.markdown("**Add a user**")
            c1, c2 = st.columns(2)
            name = c1.text_input("User name", key="adm_user_name")
            full = c2.text_input("Full name", key="adm_user_full")
            roles = st.multiselect("Roles", [r.value for r in Role], key="adm_user_roles")
            c3, c4 = st.columns(2)
            pw = c3.text_input("Password", type="password", key="adm_user_password")
            pw2 = c4.text_input("Password again", type="password", key="adm_user_password2")
            if st.form_submit_button("Add user"):
                if pw != pw2:
                    st.error("The two passwords differ.")
                else:
                    user = call(admin_svc.add_user, name, roles, pw, full_name=full)
                    if user is not FAILED:
                        done(f"User {name.strip()} added ({', '.join(sorted(set(roles)))}).",
                             clear=("adm_user_name", "adm_user_full", "adm_user_roles",
                                    "adm_user_password", "adm_user_password2"))
        with st.form("adm_user_lock"):
            st.markdown("**Lock or unlock an account** (a locked user cannot sign in; the "
                        "history keeps their name)")
            status = {u["name"]: "may sign in" if u["active"] else "locked" for u in users}
            who = st.selectbox("User", list(status), key="adm_lock_user",
                               format_func=lambda n: f"{n} ({status[n]})")
            c1, c2, _ = st.columns([1, 1, 3])
            lock = c1.form_submit_button("Lock")
            unlock = c2.form_submit_button("Unlock")
        if lock and call(admin_svc.deactivate_user, who) is not FAILED:
            done(f"User {who} locked.")
        if unlock and call(admin_svc.reactivate_user, who) is not FAILED:
            done(f"User {who} unlocked.")

# ---------------------------------------------------------------- sites, instruments, grades
with tab_sites:
    cat = call(views.catalog)
    if cat is not FAILED:
        st.markdown("**Sites**")
        st.dataframe(pd.DataFrame(cat["sites"], columns=["name", "timezone"]).rename(
            columns={"timezone": "time zone"}), hide_index=True, key="adm_sites")
        st.markdown("**Instruments**")
        st.dataframe(pd.DataFrame([{
            "serial": i["serial"], "site": i["site"],
            "range (cm⁻¹)": f"{i['range_cm1'][1]:g}–{i['range_cm1'][0]:g}",
            "resolution (cm⁻¹)": i["resolution_cm1"],
            "status": "in service" if i["active"] else "out of service"}
            for i in cat["instruments"]], columns=["serial", "site", "range (cm⁻¹)",
                                                  "resolution (cm⁻¹)", "status"]),
            hide_index=True, key="adm_instruments")
        st.markdown("**Grades**")
        st.dataframe(pd.DataFrame(cat["grades"], columns=["code", "name", "family"]),
                     hide_index=True, key="adm_grades")
    if cat is not FAILED and may(Action.SITE_ADD):
        with st.form("adm_site_add"):
            st.markdown("**Add a site**")
            c1, c2 = st.columns(2)
            site = c1.text_input("Site name", key="adm_site_name")
            tz = c2.text_input("Time zone (IANA name, e.g. Europe/Oslo)", value="UTC",
                               key="adm_site_tz")
            if st.form_submit_button("Add site"):
                if call(admin_svc.add_site, site, timezone=tz.strip()) is not FAILED:
                    done(f"Site {site.strip()} added.", clear=("adm_site_name",))
    if cat is not FAILED and may(Action.INSTRUMENT_ADD):
        with st.form("adm_instrument_add"):
            st.markdown("**Add an instrument**")
            c1, c2 = st.columns(2)
            serial = c1.text_input("Serial", key="adm_inst_serial")
            at_site = c2.selectbox("Site", [s["name"] for s in cat["sites"]], key="adm_inst_site")
            c3, c4, c5 = st.columns(3)
            span = c3.text_input("Spectral range (cm⁻¹, high-low)", value="4000-650",
                                 key="adm_inst_range")
            resolution = c4.number_input("Resolution (cm⁻¹)", min_value=0.01, value=4.0,
                                         key="adm_inst_resolution")
            path_um = c5.number_input("Path length (µm)", min_value=0.1, value=50.0,
                                      key="adm_inst_path")
            desc = st.text_input("Description", key="adm_inst_desc")
            if st.form_submit_button("Add instrument"):
                if at_site is None:
                    st.error("Add a site first.")
                elif call(admin_svc.add_instrument, serial, site=at_site, spectral_range=span,
                          resolution=float(resolution), pathlength_um=float(path_um),
                          description=desc) is not FAILED:
                    done(f"Instrument {serial.strip()} added at {at_site}.",
                         clear=("adm_inst_serial", "adm_inst_desc"))
    if cat is not FAILED and may(Action.GRADE_ADD):
        with st.form("adm_grade_add"):
            st.markdown("**Add a grade**")
            c1, c2, c3 = st.columns(3)
            code = c1.text_input("Code", key="adm_grade_code")
            gname = c2.text_input("Name", key="adm_grade_name")
            family = c3.selectbox("Fuel family", ["gasoline", "diesel", "jet", "other"],
                                  key="adm_grade_family")
            if st.form_submit_button("Add grade"):
                if call(admin_svc.add_grade, code, name=gname, family=family) is not FAILED:
                    done(f"Grade {code.strip()} added.", clear=("adm_grade_code", "adm_grade_name"))

# ---------------------------------------------------------------- reference methods
with tab_methods:
    methods = call(views.reference_methods)
    if methods is not FAILED:
        st.caption("r and R are the 95 % repeatability and reproducibility limits of the method "
                   "(X: the level of the result). A change of a method's name, r or R makes every "
                   "model of its property in service due for revalidation.")
        st.dataframe(pd.DataFrame([{
            "property": m["property"], "method": m["code"], "name": m["name"], "r": m["r"],
            "R": m["R"], "cost per test": m["cost"], "currency": m["currency"],
            "turnaround (days)": m["turnaround_days"],
            "status": "in use" if m["active"] else "withdrawn"}
            for m in methods]), hide_index=True, key="adm_methods")
    if methods and methods is not FAILED and may(Action.METHOD_EDIT):
        keys = [(m["property"], m["code"]) for m in methods]
        picked = st.selectbox("Method", keys, key="adm_method_pick",
                              format_func=lambda k: f"{k[0]}: {k[1]}")
        m = methods[keys.index(picked)]
        with st.form("adm_method_edit"):
            st.markdown(f"**Edit {m['code']} for {m['property']}** (blank r or R: unchanged)")
            c1, c2, c3 = st.columns(3)
            cost = c1.number_input("Cost per test", min_value=0.0, value=float(m["cost"]),
                                   key=f"adm_method_cost_{picked}")
            currency = c2.text_input("Currency", value=m["currency"],
                                     key=f"adm_method_currency_{picked}")
            days = c3.number_input("Turnaround (days)", min_value=0, step=1,
                                   value=int(m["turnaround_days"]), key=f"adm_method_days_{picked}")
            c4, c5 = st.columns(2)
            r_text = c4.text_input("r (a constant)", key=f"adm_method_r_{picked}",
                                   placeholder=m["r"])
            big_r_text = c5.text_input("R (a constant)", key=f"adm_method_R_{picked}",
                                       placeholder=m["R"])
            if st.form_submit_button("Save method"):
                ok_r, r_new = typed_number(r_text, "r")
                ok_big_r, big_r_new = typed_number(big_r_text, "R")
                typed = {"cost": float(cost), "currency": currency.strip(),
                         "turnaround_days": int(days), "repeatability": r_new,
                         "reproducibility": big_r_new}
                was = {"cost": m["cost"], "currency": m["currency"],
                       "turnaround_days": m["turnaround_days"]}
                changes = {k: v for k, v in typed.items() if v is not None and v != was.get(k)}
                if ok_r and ok_big_r and not changes:
                    st.info("Nothing changed.")
                elif ok_r and ok_big_r and call(revalidation.edit_method, m["code"], m["property"],
                                                **changes) is not FAILED:
                    done(f"Method {m['code']} ({m['property']}) saved: "
                         + ", ".join(field_label(k) for k in changes) + ".",
                         clear=(f"adm_method_r_{picked}", f"adm_method_R_{picked}"))

# ---------------------------------------------------------------- acceptance criteria
with tab_criteria:
    props = call(property_svc.list_properties)
    if props is not FAILED:
        st.caption("What a validation must meet before a model version can be approved; the "
                   "defaults apply unless a property overrides them. A blank optional criterion "
                   "is not checked.")
        fields = list(property_svc.CRITERIA_FIELDS)
        st.dataframe(pd.DataFrame([{"property": p["code"], **{
            criterion(f): ("" if p["acceptance"].get(f) is None else p["acceptance"][f])
            for f in fields}, "overridden": ", ".join(criterion(f) for f in p["overrides"])}
            for p in props]).astype(str), hide_index=True, key="adm_criteria")
    if props and props is not FAILED and may(Action.PROPERTY_EDIT):
        code = st.selectbox("Property", [p["code"] for p in props], key="adm_crit_property")
        current = next(p for p in props if p["code"] == code)["acceptance"]
        with st.form("adm_criteria_edit"):
            st.markdown(f"**Acceptance criteria for {code}**")
            typed = {}
            cols = st.columns(3)
            for k, f in enumerate(fields):
                value = current.get(f)
                typed[f] = cols[k % 3].text_input(criterion(f), key=f"adm_crit_{code}_{f}",
                                                  value="" if value is None else f"{value:g}")
            if st.form_submit_button("Save criteria"):
                was = {f: "" if current.get(f) is None else f"{current[f]:g}" for f in fields}
                changed = {f: v.strip() for f, v in typed.items() if v.strip() != was[f]}
                if not changed:
                    st.info("Nothing changed.")
                elif call(property_svc.edit_property, code, acceptance=changed) is not FAILED:
                    done(f"Acceptance criteria of {code} saved: "
                         + ", ".join(f"{criterion(f)} {v or 'not checked'}"
                                     for f, v in changed.items()) + ".")
