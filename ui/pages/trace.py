"""Trace and verify: a reported result back to its roots, and proof nothing was altered."""

from __future__ import annotations

import json
from datetime import datetime, timezone
from html import escape

import pandas as pd
import streamlit as st

from registry.lifecycle.permissions import Action
from registry.lineage.trace_render import tree
from registry.services import audit as audit_svc
from registry.services import views
from ui.common import FAILED, actor, call, may, require_actor

require_actor()
st.title("Trace and verify")
st.caption("Follow a reported result to the model version that produced it, who signed that "
           "version and on what evidence, the calibration samples, their spectra and their "
           "reference results; then check that the audit trail and every stored hash still agree.")

# Top-level branches of up to this many items are drawn open; a calibration set (hundreds of
# members) and everything deeper stay closed until clicked.
_OPEN_MAX = 20
_TREE_CSS = """<style>
.trace-tree{line-height:1.5}
.trace-tree li,.trace-tree summary{font-size:.95rem}
.trace-tree details{margin:.15rem 0 .15rem 1.1rem}
.trace-tree > details{margin-left:0}
.trace-tree summary{cursor:pointer}
.trace-tree ul{margin:.1rem 0 .2rem 1.1rem;padding-left:.6rem}
.trace-tree li{margin:0}
.trace-tree .n{color:#6b6b6b;font-size:.85em}
</style>"""


def tree_html(nodes: list, depth: int = 0) -> str:
    """Nested, collapsible branches (``<details>``) for nodes with children, list items for
    leaves. Every label is escaped."""
    leaves = [label for label, kids in nodes if not kids]
    parts = []
    for label, kids in nodes:
        if kids:
            opened = " open" if depth == 0 and len(kids) <= _OPEN_MAX else ""
            parts.append(f"<details{opened}><summary>{escape(label)} "
                         f"<span class='n'>({len(kids)})</span></summary>"
                         f"{tree_html(kids, depth + 1)}</details>")
    if leaves:
        parts.insert(0, "<ul>" + "".join(f"<li>{escape(x)}</li>" for x in leaves) + "</ul>")
    return "".join(parts)


def show_trace(out: dict) -> None:
    doc = out["document"]
    title, branches = tree(doc)
    st.subheader(title)
    altered = (doc.get("integrity") or {}).get("altered") or []
    if altered:
        st.error("Stored content no longer matches its hash: " + "; ".join(str(a) for a in altered))
    c1, c2, _ = st.columns([1, 1, 2])
    c1.download_button("Trace as HTML", out["html"], file_name=f"{out['name']}.html",
                       mime="text/html", key="trace_download", on_click="ignore")
    c2.download_button("Trace as JSON", out["json"], file_name=f"{out['name']}.json",
                       mime="application/json", key="trace_download_json", on_click="ignore")
    st.caption(doc.get("caution", ""))
    st.html(_TREE_CSS + "<div class='trace-tree'>" + tree_html(branches) + "</div>")


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
        show_trace(out)

# ---------------------------------------------------------------- verification
RECORD_NAMES = {"audit_event": "audit event", "spectral_axis": "spectral axis",
                "reference_result": "reference result", "calibration_set": "calibration set",
                "model_version": "model version", "validation_record": "validation record"}
PLURALS = {"spectrum": "spectra"}
PROBLEM_COLUMNS = ["record", "id", "what changed", "vouched for by"]


def counted(kind: str, n: int) -> str:
    """"2020 spectra", "1 calibration set": a checked count in words."""
    word = RECORD_NAMES.get(kind, kind.replace("_", " "))
    return f"{n} {word if n == 1 else PLURALS.get(kind, word + 's')}"


def problem_rows(doc: dict) -> list[dict]:
    """Each problem as words: which record, its id, what changed, which event vouched for it."""
    rows = []
    for p in doc["chain_problems"] + doc["content_problems"]:
        kind = p["entity_type"]
        record = RECORD_NAMES.get(kind, kind.replace("_", " "))
        event = p.get("vouched_by_event")
        rows.append({"record": record + (f" ({p['label']})" if p.get("label") else ""),
                     "id": "" if p["entity_id"] is None else str(p["entity_id"]),
                     "what changed": p["message"],
                     "vouched for by": "" if event is None else f"audit event {event}"})
    return rows


def verification_report(report, who: str) -> dict:
    doc = report.to_json()
    return {"report": "audit trail verification", "verified_by": who,
            "verified_at": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"), **doc}


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
        st.session_state["verify_out"] = (None if report is FAILED
                                          else verification_report(report, actor().name))
    doc = st.session_state.get("verify_out")
    if doc:
        checked = ", ".join(counted(k, v) for k, v in (doc.get("checked") or {}).items())
        if doc["intact"]:
            st.success(f"Intact: {doc['events']} events; head {doc['head'][:16]}…; checked {checked}.")
        else:
            rows = problem_rows(doc)
            first = doc.get("first_broken_link")
            st.error(f"Not intact: {len(rows)} problem(s)"
                     + (f"; the chain first breaks at audit event {first['seq']}" if first else
                        "; every link of the chain holds, stored content does not")
                     + f". Checked {doc['events']} events and {checked}.")
            st.dataframe(pd.DataFrame(rows, columns=PROBLEM_COLUMNS),
                         hide_index=True, key="verify_problems")
        stamp = doc["verified_at"][:10]
        c1, c2, _ = st.columns([1, 1, 1])
        c1.download_button("Verification report (JSON)",
                           json.dumps(doc, indent=2, ensure_ascii=False) + "\n",
                           file_name=f"audit-verification-{stamp}.json", mime="application/json",
                           key="verify_download", on_click="ignore")
        if not doc["intact"]:
            c2.download_button("Problems found (CSV)",
                               pd.DataFrame(problem_rows(doc), columns=PROBLEM_COLUMNS)
                               .to_csv(index=False),
                               file_name=f"audit-verification-{stamp}.csv", mime="text/csv",
                               key="verify_download_csv", on_click="ignore")
