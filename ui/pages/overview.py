"""Overview: what the registry holds, what is due, and the latest predictions with their flags."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from registry.services import revalidation, views
from registry.services.status import registry_status
from ui.common import FAILED, call, database_url, flags_text, require_actor, when

require_actor()
st.title("Overview")

status = call(registry_status, database_url(), with_actor=False)
if status is not FAILED:
    counts = status["counts"]
    shown = [("Samples", "samples"), ("Spectra", "spectra"), ("Reference results", "reference_results"),
             ("Model versions", "model_versions"), ("Active deployments", "deployments"),
             ("Predictions", "predictions")]
    for col, (title, key) in zip(st.columns(len(shown)), shown):
        col.metric(title, counts.get(key, 0))
    if not status["up_to_date"]:
        st.warning(f"The registry schema is at revision {status['revision']}, not {status['head']}: "
                   "run `specledger init` to upgrade it.")
    with st.expander("All counts"):
        st.dataframe(pd.DataFrame(sorted(counts.items()), columns=["entity", "rows"]),
                     hide_index=True, key="overview_counts")

st.subheader("Revalidation due")
rows = call(revalidation.due_list, within_days=30)
if rows is not FAILED:
    if rows:
        st.dataframe(pd.DataFrame([{
            "model": r["label"], "property": r["property"], "grade": r["grade"],
            "state": r["state"], "due (UTC)": when(r["due_at"]), "days left": r["days_left"],
            "overdue": r["overdue"], "reasons": "; ".join(r["reasons"])} for r in rows]),
            hide_index=True, key="overview_due")
    else:
        st.write("No model version in service is due within 30 days.")

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
