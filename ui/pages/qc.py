"""QC charts: individuals, moving range and EWMA of a control material, with signals marked."""

from __future__ import annotations

import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.lifecycle.permissions import Action
from registry.services import qc, views
from ui.common import (COLOURS, FAILED, PLOT_TEMPLATE, call, flash, may, require_actor, show_flash,
                       when)

require_actor()
st.title("QC charts")
show_flash()

charts = call(views.qc_charts_available)
if charts is FAILED:
    st.stop()
if not charts:
    st.info("No QC results yet.")
    st.stop()
names = [f"{c['instrument']} / {c['material']} / {c['property']} ({c['n']} results)" for c in charts]
pick = charts[names.index(st.selectbox("Chart", names, key="qc_chart"))]
doc = call(qc.qc_chart, instrument=pick["instrument"], material=pick["material"],
           property_code=pick["property"])
if doc is FAILED:
    st.stop()

unit = f" ({doc['unit']})" if doc["unit"] else ""
c = st.columns(4)
c[0].metric("Model", doc["model"])
c[1].metric("Results", doc["n"])
c[2].metric("Known value", f"{doc['known_value']:g}" if doc["known_value"] is not None else "")
c[3].metric("Mean − known", f"{doc['bias_vs_known']:+.3g}" if doc["bias_vs_known"] is not None else "")
if doc["open_triggers"]:
    st.warning(f"{len(doc['open_triggers'])} open QC signal(s): predictions of {doc['model']} on "
             f"{doc['instrument']} carry the qc_signal flag until the cause is found and cleared.")

chart = doc["chart"]
if chart is None:
    st.info(doc.get("note", "No control limits yet."))
    st.stop()

x = [t for t in doc["measured_at"]]
signal_idx = sorted({s["index"] for s in chart["signals"]})


def limit_line(fig, y, name, dash="dash"):
    fig.add_trace(go.Scatter(x=x, y=y if isinstance(y, list) else [y] * len(x), mode="lines",
                             name=name, line={"color": COLOURS["limit"], "dash": dash, "width": 1}))


def base(title: str, ytitle: str, height: int = 300) -> go.Figure:
    fig = go.Figure()
    fig.update_layout(template=PLOT_TEMPLATE, height=height, title=title, yaxis_title=ytitle,
                      xaxis_title="measured (UTC)", legend={"orientation": "h", "y": -0.3})
    return fig


ind = base(f"Individuals: {doc['material']} on {doc['instrument']}", f"{doc['property']}{unit}", 340)
ind.add_trace(go.Scatter(x=x, y=chart["value"], mode="lines+markers", name="result",
                         line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"], "size": 6}))
limit_line(ind, chart["center"], "centre line", "solid")
limit_line(ind, chart["i_ucl"], "upper limit")
limit_line(ind, chart["i_lcl"], "lower limit")
if signal_idx:
    ind.add_trace(go.Scatter(x=[x[i] for i in signal_idx], y=[chart["value"][i] for i in signal_idx],
                             mode="markers", name="signal",
                             marker={"color": COLOURS["marker"], "size": 13, "symbol": "x"}))
st.plotly_chart(ind, key="qc_individuals")

mr = base("Moving range (span 2)", f"range{unit}")
mr.add_trace(go.Scatter(x=x, y=chart["moving_range"], mode="lines+markers", name="moving range",
                        line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"], "size": 6}))
limit_line(mr, chart["mr_bar"], "mean moving range", "solid")
limit_line(mr, chart["mr_ucl"], "upper limit")
st.plotly_chart(mr, key="qc_moving_range")

ew = base(f"EWMA (λ = {chart['lam']:g})", f"EWMA{unit}")
ew.add_trace(go.Scatter(x=x, y=chart["ewma"], mode="lines+markers", name="EWMA",
                        line={"color": COLOURS["inside"]}, marker={"color": COLOURS["inside"], "size": 6}))
limit_line(ew, chart["center"], "centre line", "solid")
limit_line(ew, chart["ewma_ucl"], "upper limit")
limit_line(ew, chart["ewma_lcl"], "lower limit")
ewma_signals = [s["index"] for s in chart["signals"] if s["rule"].startswith("ewma")]
if ewma_signals:
    ew.add_trace(go.Scatter(x=[x[i] for i in ewma_signals], y=[chart["ewma"][i] for i in ewma_signals],
                            mode="markers", name="signal",
                            marker={"color": COLOURS["marker"], "size": 13, "symbol": "x"}))
st.plotly_chart(ew, key="qc_ewma")
st.caption(f"Limits from the first {chart['baseline_size']} results; signals are not raised before "
           f"{doc['min_results_for_signals']} results.")

st.markdown("**Signals**")
if chart["signals"]:
    st.dataframe(pd.DataFrame([{"result": s["index"] + 1, "measured (UTC)": when(x[s["index"]]),
                                "rule": s["rule"], "what": s["message"]} for s in chart["signals"]]),
                 hide_index=True, key="qc_signals")
else:
    st.write("None: the chart is in control.")

if doc["open_triggers"] and may(Action.QC_CLEAR_SIGNAL):
    with st.form("qc_clear"):
        ids = [t["id"] for t in doc["open_triggers"]]
        trig = st.selectbox("Open signal", ids, key="qc_clear_id",
                            format_func=lambda i: f"trigger {i}")
        reason = st.text_input("Cause found (required)", key="qc_clear_reason")
        if st.form_submit_button("Clear signal"):
            if call(qc.clear_qc_signal, trig, reason) is not FAILED:
                flash(f"QC signal {trig} cleared")
                st.rerun()
