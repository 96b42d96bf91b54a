"""Due: model versions in service by revalidation due date, overdue first, and a timeline."""

from __future__ import annotations

import streamlit as st

from registry.clock import now
from registry.services import revalidation
from ui.common import FAILED, call, require_actor
from ui.due_view import due_frame, due_timeline

require_actor()
st.title("Revalidation due")

limit = st.checkbox("Only versions due within a number of days", key="due_limit")
within = st.number_input("Days", min_value=0, value=30, step=1, key="due_within") if limit else None
rows = call(revalidation.due_list, within_days=int(within) if within is not None else None)
if rows is not FAILED:
    if not rows:
        st.write("No approved or active model version is due.")
    else:
        overdue = sum(1 for r in rows if r["overdue"])
        if overdue:
            st.warning(f"{overdue} model version(s) overdue: their predictions carry the overdue "
                       "flag. Confirm results a decision depends on by the specification test "
                       "method.")
        st.dataframe(due_frame(rows, local=True), hide_index=True, key="due_table")
        st.markdown("**Timeline of due dates**")
        st.plotly_chart(due_timeline(rows, now()), key="due_timeline")
        st.caption("Grey: from the last passing validation to the scheduled date (diamond); "
                   "brick red: overdue, from the scheduled date or the open trigger that made "
                   "it due, until today (dotted line).")
