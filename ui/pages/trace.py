"""Trace and verify: a reported result back to its roots, and proof nothing was altered."""

from __future__ import annotations

import streamlit as st

from registry.lifecycle.permissions import Action
from registry.services import audit as audit_svc
from registry.services import views
from ui.common import FAILED, call, may, require_actor

require_actor()
st.title("Trace and verify")
st.caption("Follow a reported result to the model version that produced it, who signed that "
           "version and on what evidence, the calibration samples, their spectra and their "
           "reference results; then check that the audit trail and every stored hash still agree.")

if not may(Action.TRACE):
    st.info("Tracing is for auditors, reviewers and lab managers; your roles do not include it.")
else:
    latest = call(views.latest_prediction_id)
    with st.form("trace_form"):
        kind = st.radio("Start from", ["a prediction", "a model version", "a sample"],
                        horizontal=True, key="trace_kind")
        c1, c2 = st.columns(2)
        pid = c1.number_input("Prediction id", min_value=1, step=1,
                              value=int(latest) if isinstance(latest, int) else 1, key="trace_id")
        label = c2.text_input("Model version (e.g. RON-PREM95-v2)", key="trace_model")
        c3, c4 = st.columns(2)
        sample = c3.text_input("Sample id", key="trace_sample")
        prop = c4.text_input("Property code (with a sample)", key="trace_property")
        go = st.form_submit_button("Trace")
    if go:
        if kind == "a prediction":
            out = call(views.trace_documents, int(pid))
            name = f"trace-prediction-{int(pid)}"
        elif kind == "a model version":
            out = call(views.trace_documents, model=label.strip() or None)
            name = f"trace-model-{label.strip()}"
        else:
            out = call(views.trace_documents, sample=sample.strip() or None,
                       property_code=prop.strip().upper() or None)
            name = f"trace-sample-{sample.strip()}"
        st.session_state["trace_out"] = None if out is FAILED else {"name": name, **out}

    out = st.session_state.get("trace_out")
    if out:
        integrity = out["document"].get("integrity", {})
        altered = integrity.get("altered") or []
        if altered:
            st.error("Stored content no longer matches its hash: " + "; ".join(map(str, altered)))
        st.download_button("Download the trace as one HTML file", out["html"],
                           file_name=f"{out['name']}.html", mime="text/html",
                           key="trace_download")
        tab_text, tab_json = st.tabs(["Text", "JSON"])
        with tab_text:
            st.code(out["text"], language=None)
        with tab_json:
            st.json(out["json"], expanded=False)

st.divider()
st.subheader("Audit trail")
if not may(Action.AUDIT_VERIFY):
    st.info("Verifying the audit trail is the auditor's task.")
else:
    st.caption("Recomputes every link of the hash chain and every content hash (spectra, "
               "reference results, calibration sets, model artifacts, validation records, "
               "signatures, predictions) and compares them with what the chain vouched for.")
    if st.button("Verify the audit trail", key="verify_button"):
        with st.spinner("verifying"):
            report = call(audit_svc.verify_registry)
        if report is not FAILED:
            doc = report.to_json()
            if report.intact:
                st.success(f"Intact: {doc['events']} events; head "
                           f"{str(report.head)[:16]}…; checked "
                           + ", ".join(f"{v} {k}" for k, v in (doc.get("checked") or {}).items()))
            else:
                st.error(f"Not intact: first broken link at event {report.first_broken_seq}; "
                         f"{len(report.problems)} problem(s).")
                st.code("\n".join(str(p) for p in report.problems[:200]), language=None)
