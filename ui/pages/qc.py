"""QC charts: individuals, moving range and EWMA of a control material, with signals marked."""

from __future__ import annotations

import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.lifecycle.permissions import Action
from registry.services import qc, views
from ui.common import (COLOURS, FAILED, PLOT_TEMPLATE, call, flash, may, require_actor, show_flash,
                       when)
from ui.format import num, unit_of

require_actor()
st.title("QC charts")
show_flash()

charts = call(views.qc_charts_available)
if charts is FAILED:
    st.stop()
if not charts:
    st.info("No QC results yet.")
    st.stop()
names = [f"{c['instrument']} / {c['material']} / {c['property']} / {c['model']} ({c['n']} results)"
         for c in charts]
pick = charts[names.index(st.selectbox("Chart", names, key="qc_chart"))]
doc = call(qc.qc_chart, instrument=pick["instrument"], material=pick["material"],
           property_code=pick["property"], model=pick["model"])
if doc is FAILED:
    st.stop()

unit = unit_of(doc["unit"])
chart = doc["chart"]
signals = chart["signals"] if chart else []
c = st.columns(5)
c[0].metric("Model", doc["model"])
c[1].metric("Results", doc["n"])
c[2].metric("Signals", len(signals))
c[3].metric("Known value", num(doc["known_value"]))
c[4].metric("Mean − known", f"{doc['bias_vs_known']:+.3g}" if doc["bias_vs_known"] is not None else "")
if doc["open_triggers"]:
    st.warning(f"{len(doc['open_triggers'])} open QC signal(s): predictions of {doc['model']} on "
               f"{doc['instrument']} carry the qc_signal flag until the cause is found and cleared. "
               "Confirm results a decision depends on by the specification test method.")

if chart is None:
    st.info(doc.get("note", "No control limits yet."))
    st.stop()

x = list(doc["measured_at"])
# The legend sits above the plot area, clear of both axis titles; the chart's name is a
# heading of its own rather than a plot title the legend would collide with.
LEGEND = {"orientation": "h", "yanchor": "bottom", "y": 1.02, "xanchor": "left", "x": 0}


def limit_line(fig, y, name, dash="dash"):
    fig.add_trace(go.Scatter(x=x, y=y if isinstance(y, list) else [y] * len(x), mode="lines",
                             name=name, line={"color": COLOURS["limit"], "dash": dash, "width": 1}))


def base(ytitle: str, height: int = 320) -> go.Figure:
    fig = go.Figure()
    fig.update_layout(template=PLOT_TEMPLATE, height=height, yaxis_title=ytitle,
                      xaxis_title="measured (UTC)", legend=LEGEND, margin={"t": 60})
    return fig


def mark(fig, series: list, which: str, name: str) -> int:
    """Mark the points of this chart's own signals (one marker per point); their count."""
    idx = sorted({s["index"] for s in signals if s["chart"] == which})
    if idx:
        fig.add_trace(go.Scatter(x=[x[i] for i in idx], y=[series[i] for i in idx],
                                 mode="markers", name=f"{name} ({len(idx)})",
                                 marker={"color": COLOURS["marker"], "size": 13, "symbol": "x"}))
    return len(idx)


st.markdown(f"**Individuals: {doc['material']} on {doc['instrument']}**")
ind = base(f"{doc['property']}{unit}", 340)
ind.add_trace(go.Scatter(x=x, y=chart["value"], mode="lines+markers", name=f"result ({doc['n']})",
                         line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"], "size": 6}))
limit_line(ind, chart["center"], "centre line", "solid")
limit_line(ind, chart["i_ucl"], "upper limit")
limit_line(ind, chart["i_lcl"], "lower limit")
mark(ind, chart["value"], "individuals", "run-rule signal")
st.plotly_chart(ind, key="qc_individuals")

st.markdown("**Moving range (span 2)**")
mr = base(f"moving range{unit}")
mr.add_trace(go.Scatter(x=x, y=chart["moving_range"], mode="lines+markers", name="moving range",
                        line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"], "size": 6}))
limit_line(mr, chart["mr_bar"], "mean moving range", "solid")
limit_line(mr, chart["mr_ucl"], "upper limit")
mark(mr, chart["moving_range"], "moving_range", "above the limit")
st.plotly_chart(mr, key="qc_moving_range")

st.markdown(f"**EWMA (λ = {chart['lam']:g})**")
ew = base(f"EWMA{unit}")
ew.add_trace(go.Scatter(x=x, y=chart["ewma"], mode="lines+markers", name="EWMA",
                        line={"color": COLOURS["inside"]}, marker={"color": COLOURS["inside"], "size": 6}))
limit_line(ew, chart["center"], "centre line", "solid")
limit_line(ew, chart["ewma_ucl"], "upper limit")
limit_line(ew, chart["ewma_lcl"], "lower limit")
mark(ew, chart["ewma"], "ewma", "beyond the limits")
st.plotly_chart(ew, key="qc_ewma")
st.caption(f"Limits from the first {chart['baseline_size']} results; signals are not raised before "
           f"{doc['min_results_for_signals']} results. Each chart marks its own rules' signals; "
           "a point may signal under several rules, so the table can list it more than once.")

CHART_WORDS = {"individuals": "individuals", "moving_range": "moving range", "ewma": "EWMA"}
st.markdown(f"**Signals ({len(signals)})**")
if signals:
    st.dataframe(pd.DataFrame([{"result": s["index"] + 1, "measured (UTC)": when(x[s["index"]]),
                                "chart": CHART_WORDS[s["chart"]], "rule": s["name"],
                                "what": s["message"]} for s in signals]),
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
