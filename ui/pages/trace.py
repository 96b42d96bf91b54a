"""Trace: a reported prediction back to its model, calibration set, spectra and reference results."""

from __future__ import annotations

import streamlit as st

from registry.services import views
from ui.common import FAILED, call, not_available, optional_service, require_actor

require_actor()
st.title("Trace a prediction")
if optional_service("audit") is None:
    not_available("Tracing", "audit")
    st.stop()

with st.form("trace_form"):
    pid = st.number_input("Prediction id", min_value=1, step=1, value=1, key="trace_id")
    go = st.form_submit_button("Trace")
if go:
    out = call(views.trace_documents, int(pid))
    st.session_state["trace_out"] = None if out is FAILED else {"id": int(pid), **out}

out = st.session_state.get("trace_out")
if out:
    st.download_button("Download the trace as HTML", out["html"], file_name=f"trace-prediction-{out['id']}.html",
                       mime="text/html", key="trace_download")
    tab_text, tab_json = st.tabs(["Text", "JSON"])
    with tab_text:
        st.code(out["text"], language=None)
    with tab_json:
        st.json(out["json"], expanded=False)
