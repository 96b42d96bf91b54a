"""Specledger front end: sign in, then pages for the registry's everyday questions.

Run with ``streamlit run ui/app.py``; the registry is ``SPECLEDGER_DATABASE_URL``.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # pages import ``ui.common`` whatever the working directory
    sys.path.insert(0, str(ROOT))

import streamlit as st  # noqa: E402

from registry.errors import RegistryError  # noqa: E402
from registry.services.auth import authenticate  # noqa: E402
from registry.storage.engine import mask_url, session_scope  # noqa: E402
from ui.common import ACTOR_KEY, CAUTION, actor, database_url, engine  # noqa: E402

PAGES = [
    ("pages/overview.py", "Overview", ":material/dashboard:"),
    ("pages/coverage.py", "Coverage", ":material/scatter_plot:"),
    ("pages/send_list.py", "Send list", ":material/science:"),
    ("pages/models.py", "Models", ":material/model_training:"),
    ("pages/qc.py", "QC charts", ":material/monitoring:"),
    ("pages/due.py", "Due", ":material/event:"),
    ("pages/trace.py", "Trace", ":material/account_tree:"),
    ("pages/imports.py", "Import", ":material/upload_file:"),
]


def sign_in() -> None:
    st.title("Specledger")
    st.write("Calibration sets, model versions and their evidence for the fuel laboratory.")
    with st.form("sign_in"):
        name = st.text_input("User name", key="sign_in_name")
        password = st.text_input("Password", type="password", key="sign_in_password")
        submitted = st.form_submit_button("Sign in")
    if submitted:
        try:
            with session_scope(engine()) as session:
                st.session_state[ACTOR_KEY] = authenticate(session, name.strip(), password)
        except RegistryError as exc:
            st.error(str(exc))
            return
        st.rerun()


def sidebar() -> None:
    a = actor()
    with st.sidebar:
        if a is not None:
            st.markdown(f"Signed in as **{a.name}**  \nroles: {', '.join(sorted(a.roles))}")
            if st.button("Sign out", key="sign_out"):
                st.session_state.clear()
                st.rerun()
        st.caption(f"Registry: {mask_url(database_url())}")
        st.divider()
        st.caption(CAUTION)


st.set_page_config(page_title="Specledger", layout="wide")
if actor() is None:
    nav = st.navigation([st.Page(sign_in, title="Sign in", url_path="sign-in")])
else:
    nav = st.navigation([st.Page(path, title=title, icon=icon) for path, title, icon in PAGES])
sidebar()
nav.run()
