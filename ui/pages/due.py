"""Due: model versions in service by revalidation due date, overdue first."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from registry.services import revalidation
from ui.common import FAILED, call, require_actor, when

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
            st.warning(f"{overdue} model version(s) overdue: their predictions carry the overdue flag.")
        rows = sorted(rows, key=lambda r: (not r["overdue"], r["due_at"]))
        st.dataframe(pd.DataFrame([{
            "model": r["label"], "property": r["property"], "grade": r["grade"], "state": r["state"],
            "overdue": r["overdue"], "days left": r["days_left"], "due (UTC)": when(r["due_at"]),
            "due (site time)": "; ".join(f"{d['site']}: {d['due_at_local']:%Y-%m-%d %H:%M} "
                                         f"({d['timezone']})" for d in r["due_at_local"]),
            "reasons": "; ".join(r["reasons"]), "last validated": when(r["last_validated_at"]),
            "interval (days)": r["interval_days"]} for r in rows]),
            hide_index=True, key="due_table")
