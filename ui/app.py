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

from ui.common import actor, check_registry, sidebar, sign_in_form  # noqa: E402
from ui.navigation import pages_for  # noqa: E402

#: The framework's deploy button and developer menu are not for the lab's users. Set here,
#: not only in .streamlit/config.toml, which is read from the working directory alone.
TOOLBAR_MODE = "minimal"


def sign_in() -> None:
    sidebar()
    sign_in_form()


if st.get_option("client.toolbarMode") != TOOLBAR_MODE:
    # The option reaches the browser with each run's start message, so the run that sets
    # it first starts over (once per server process) before anything is drawn.
    st.set_option("client.toolbarMode", TOOLBAR_MODE)
    st.rerun()
st.set_page_config(page_title="Specledger", layout="wide")
if not check_registry():
    st.stop()
if actor() is None:
    nav = st.navigation([st.Page(sign_in, title="Sign in", url_path="sign-in")])
else:
    nav = st.navigation([st.Page(path, title=title, icon=icon)
                         for path, title, icon in pages_for(actor().roles)])
nav.run()
