"""Overview: what the registry holds, what is due, and the latest predictions with their flags."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from registry.clock import now
from registry.services import revalidation, views
from registry.services.status import registry_status
from ui.common import FAILED, call, database_url, flags_text, require_actor, when
from ui.due_view import due_frame, due_timeline

#: The Overview's table lists versions due within this many days (overdue ones always).
LOOK_AHEAD_DAYS = 30

require_actor()
st.title("Overview")

status = call(registry_status, database_url(), with_actor=False)
if status is not FAILED:
    counts = status["counts"]
    shown = [("Samples", counts.get("samples", 0)), ("Spectra", counts.get("spectra", 0)),
             ("Reference results", counts.get("reference_results", 0)),
             ("Model versions", counts.get("model_versions", 0)),
             # deployments in the active state only: superseded and retired ones are history
             ("Active deployments", status["in_service"].get("active_deployments", 0)),
             ("Predictions", counts.get("predictions", 0))]
    for col, (title, value) in zip(st.columns(len(shown)), shown):
        col.metric(title, value)
    if not status["up_to_date"]:
        st.warning(f"The registry schema is at revision {status['revision']}, not {status['head']}: "
                   "ask the administrator to upgrade the registry before using it.")
    with st.expander("All counts"):
        st.dataframe(pd.DataFrame(sorted(counts.items()), columns=["entity", "rows"]),
                     hide_index=True, key="overview_counts")

st.subheader("Revalidation due")
rows = call(revalidation.due_list)
if rows is not FAILED:
    soon = [r for r in rows if r["overdue"] or r["days_left"] <= LOOK_AHEAD_DAYS]
    if soon:
        st.dataframe(due_frame(soon), hide_index=True, key="overview_due")
    else:
        st.write(f"No model version in service is due within {LOOK_AHEAD_DAYS} days.")
    if rows:
        st.markdown("**Timeline of due dates** (every approved or active version)")
        st.plotly_chart(due_timeline(rows, now()), key="overview_timeline")

st.subheader("Recent predictions")
preds = call(views.recent_predictions, limit=25)
if preds is not FAILED:
    if preds:
        flagged = sum(1 for p in preds if p["flags"])
        st.caption(f"{len(preds)} newest predictions; {flagged} carry flags. A flagged result is "
                   "reported as flagged and confirmed by the test method where a decision depends on it.")
        st.dataframe(pd.DataFrame([{
            "id": p["id"], "predicted (UTC)": when(p["predicted_at"]), "sample": p["sample"],
            "property": p["property"], "value": round(p["value"], 3), "model": p["model"],
            "instrument": p["instrument"], "flags": flags_text(p["flags"])} for p in preds]),
            hide_index=True, key="overview_predictions")
    else:
        st.write("No predictions yet.")
