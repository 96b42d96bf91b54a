"""Coverage: where recent production lies relative to the model's calibration space."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.lifecycle.states import CURRENT_MODEL_STATES
from registry.services import models as model_svc
from registry.services import views
from ui.common import COLOURS, FAILED, PLOT_TEMPLATE, call, require_actor

require_actor()
st.title("Calibration coverage")
st.write("Calibration spectra and recent production in the first two principal components of the "
         "model's preprocessed calibration spectra. A recent spectrum counts as outside when it "
         "fails one of the model's prediction-time checks (leverage, Hotelling T², Q residual, "
         "nearest-neighbour distance).")

cat = call(views.catalog)
if cat is FAILED:
    st.stop()
props = [p["code"] for p in cat["properties"]]
grades = [g["code"] for g in cat["grades"]]
if not props or not grades:
    st.info("The registry has no properties or grades yet.")
    st.stop()
# Offer first the property and grade of a model that has a calibration space to show.
usable = call(model_svc.list_models)
usable = [r for r in (usable or []) if r["state"] in CURRENT_MODEL_STATES and r["grade"]]
if usable:
    props.sort(key=lambda p: p != usable[0]["property"])
    grades.sort(key=lambda g: g != usable[0]["grade"])
c1, c2, c3 = st.columns(3)
prop = c1.selectbox("Property", props, key="cov_property")
grade = c2.selectbox("Grade", grades, key="cov_grade")
days = c3.number_input("Recent window (days)", min_value=7, max_value=730, value=90, step=1,
                       key="cov_days")

cov = call(views.coverage_map, prop, grade, days=int(days))
if cov is FAILED:
    st.stop()

n = cov["counts"]
st.caption(f"Model {cov['model']} ({cov['model_state']}); recent = spectra of {cov['grade']} "
           f"acquired from {cov['since']:%Y-%m-%d} to {cov['until']:%Y-%m-%d} (the {cov['days']} "
           "days up to the newest one), calibration spectra excluded.")
m1, m2, m3 = st.columns(3)
m1.metric("Calibration spectra", n["calibration"])
m2.metric("Recent spectra", n["recent"])
m3.metric("Outside the calibration space",
          f"{n['outside']}" + (f" ({100 * n['share_outside']:.1f} %)" if n["share_outside"] is not None else ""))

ev = cov["explained_variance"]
cal, rec = cov["calibration"], cov["recent"]
fig = go.Figure()
fig.add_trace(go.Scatter(x=cal["scores"][:, 0], y=cal["scores"][:, 1], mode="markers",
                         name="calibration", text=cal["samples"],
                         marker={"color": COLOURS["calibration"], "size": 7, "symbol": "circle-open"}))
for label, mask, colour, symbol in (("recent, inside", ~rec["outside"], COLOURS["inside"], "circle"),
                                    ("recent, outside", rec["outside"], COLOURS["outside"], "x")):
    idx = [i for i, m in enumerate(mask) if m]
    fig.add_trace(go.Scatter(
        x=rec["scores"][idx, 0], y=rec["scores"][idx, 1], mode="markers", name=label,
        text=[f"{rec['samples'][i]} ({', '.join(rec['flags'][i]) or 'no flags'})" for i in idx],
        marker={"color": colour, "size": 8, "symbol": symbol}))
fig.update_layout(template=PLOT_TEMPLATE, height=480, legend_title_text="",
                  xaxis_title=f"PC1 ({100 * ev[0]:.1f} % of calibration variance)",
                  yaxis_title=f"PC2 ({100 * ev[1]:.1f} %)")
st.plotly_chart(fig, key="cov_scatter")

st.subheader("Distance to the model and residual")
st.caption("Hotelling T² (how far along the model's own directions) against the Q residual "
           "(what the model cannot describe), each with the model's 99 % limit. A new blend "
           "component shows as a high Q even where the scores above look familiar.")
res = cov["residuals"]
rfig = go.Figure()
rfig.add_trace(go.Scatter(x=res["calibration"]["t2"], y=res["calibration"]["q"], mode="markers",
                          name="calibration", text=cal["samples"],
                          marker={"color": COLOURS["calibration"], "size": 7,
                                  "symbol": "circle-open"}))
for label, mask, colour, symbol in (("recent, inside", ~rec["outside"], COLOURS["inside"], "circle"),
                                    ("recent, outside", rec["outside"], COLOURS["outside"], "x")):
    idx = [i for i, m in enumerate(mask) if m]
    rfig.add_trace(go.Scatter(
        x=res["recent"]["t2"][idx], y=res["recent"]["q"][idx], mode="markers", name=label,
        text=[rec["samples"][i] for i in idx], marker={"color": colour, "size": 8, "symbol": symbol}))
# Limits as line traces (shapes on log axes are easy to misplace): an L from the T² limit
# down/left of the Q limit, spanning the plotted data.
t2_all = np.concatenate([res["calibration"]["t2"], res["recent"]["t2"]])
q_all = np.concatenate([res["calibration"]["q"], res["recent"]["q"]])
lo_t2, hi_t2 = min(t2_all.min(), res["t2_limit"]) / 1.5, max(t2_all.max(), res["t2_limit"]) * 1.5
lo_q, hi_q = min(q_all.min(), res["q_limit"]) / 1.5, max(q_all.max(), res["q_limit"]) * 1.5
rfig.add_trace(go.Scatter(x=[res["t2_limit"], res["t2_limit"], None, lo_t2, hi_t2],
                          y=[lo_q, hi_q, None, res["q_limit"], res["q_limit"]], mode="lines",
                          name="99 % limits", hoverinfo="skip",
                          line={"color": COLOURS["calibration"], "dash": "dash", "width": 1}))
rfig.update_layout(template=PLOT_TEMPLATE, height=420, legend_title_text="",
                   xaxis_title="Hotelling T²", yaxis_title="Q residual", xaxis_type="log",
                   yaxis_type="log")
st.plotly_chart(rfig, key="cov_residuals")

st.subheader("Share outside the calibration space per week")
if cov["weekly"]:
    weeks = pd.DataFrame(cov["weekly"])
    bar = go.Figure(go.Bar(x=weeks["week_start"], y=100 * weeks["share"],
                           marker_color=COLOURS["inside"],
                           customdata=weeks[["outside", "n"]].to_numpy(),
                           hovertemplate="week of %{x|%Y-%m-%d}: %{customdata[0]} of "
                                         "%{customdata[1]} outside<extra></extra>"))
    bar.update_layout(template=PLOT_TEMPLATE, height=300, yaxis_title="outside (%)",
                      xaxis_title="week starting (UTC)", yaxis_range=[0, 100])
    st.plotly_chart(bar, key="cov_weekly")
else:
    st.write("No recent spectra in the window.")

if n["outside"]:
    with st.expander("Recent spectra outside the calibration space"):
        st.dataframe(pd.DataFrame([{"sample": rec["samples"][i], "spectrum": rec["spectrum_ids"][i],
                                    "acquired (UTC)": f"{rec['acquired_at'][i]:%Y-%m-%d %H:%M}",
                                    "checks failed": ", ".join(rec["flags"][i])}
                                   for i in range(len(rec["samples"])) if rec["outside"][i]]),
                     hide_index=True, key="cov_outside")
