"""Coverage: where recent production lies relative to the model's calibration space."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.lifecycle.states import CURRENT_MODEL_STATES
from registry.services import models as model_svc
from registry.services import views
from ui.common import COLOURS, FAILED, PLOT_TEMPLATE, call, kept_call, require_actor
from ui.format import num, sci, unit_of

require_actor()
st.title("Calibration coverage")
st.write("Calibration spectra and recent production in the first two principal components of the "
         "model's preprocessed calibration spectra. A recent spectrum counts as outside when it "
         "fails one of the model's prediction-time checks (leverage, Hotelling T², Q residual, "
         "nearest-neighbour distance); the table below says which. A model result does "
         "not replace the specification test method.")

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

stamp = call(views.coverage_stamp, prop, grade, days=int(days))
cov = kept_call(views.coverage_map, stamp, prop, grade, days=int(days))
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

WORDS = {c["check"]: c["words"] for c in cov["checks"]}
unit = unit_of(cov["unit"])


def limit_text(check: dict) -> str:
    limit = check["limit"]
    if limit is None:
        return ""
    if check["check"] == "y_range":
        return f"{num(limit[0])} to {num(limit[1])}{unit}"
    return sci(limit) if check["check"] == "q_residual" else num(limit)


st.markdown("**Which check put the recent spectra outside**")
st.dataframe(pd.DataFrame([{
    "check": c["words"], "limit": limit_text(c), "recent spectra failing it": c["failed"],
    "counts as outside": "yes" if c["makes_outside"] else "no (reported only)"}
    for c in cov["checks"]]), hide_index=True, key="cov_checks")
st.caption("A spectrum is outside when it fails at least one check marked yes; one spectrum "
           "often fails several, so the counts add up to more than the outside total. Q limits "
           "and values are in scientific notation.")

ev = cov["explained_variance"]
cal, rec, res = cov["calibration"], cov["recent"], cov["residuals"]


def hover(i: int) -> str:
    """One recent spectrum: sample, time, T², Q and every check it failed, in words."""
    failed = ", ".join(WORDS[f] for f in rec["flags"][i]) or "none"
    return (f"{rec['samples'][i]}, {rec['acquired_at'][i]:%Y-%m-%d %H:%M} UTC<br>"
            f"T² {num(res['recent']['t2'][i])}, Q {sci(res['recent']['q'][i])}<br>"
            f"checks failed: {failed}")


def recent_traces(fig: go.Figure, x, y) -> None:
    for label, mask, colour, symbol in (("recent, inside", ~rec["outside"], COLOURS["inside"], "circle"),
                                        ("recent, outside", rec["outside"], COLOURS["outside"], "x")):
        idx = [i for i, m in enumerate(mask) if m]
        fig.add_trace(go.Scatter(x=x[idx], y=y[idx], mode="markers", name=label,
                                 hovertext=[hover(i) for i in idx], hoverinfo="text",
                                 marker={"color": colour, "size": 8, "symbol": symbol}))


fig = go.Figure()
fig.add_trace(go.Scatter(x=cal["scores"][:, 0], y=cal["scores"][:, 1], mode="markers",
                         name="calibration", text=cal["samples"],
                         hovertemplate="%{text} (calibration)<extra></extra>",
                         marker={"color": COLOURS["calibration"], "size": 7, "symbol": "circle-open"}))
recent_traces(fig, rec["scores"][:, 0], rec["scores"][:, 1])
score_unit = "score, preprocessed absorbance units"
fig.update_layout(template=PLOT_TEMPLATE, height=480, legend_title_text="",
                  xaxis_title=f"PC1 ({score_unit}; {100 * ev[0]:.1f} % of calibration variance)",
                  yaxis_title=f"PC2 ({score_unit}; {100 * ev[1]:.1f} %)")
st.plotly_chart(fig, key="cov_scatter")

st.subheader("Distance to the model and residual")
st.caption("Hotelling T² (how far along the model's own directions) against the Q residual "
           "(what the model cannot describe), each with the model's 99 % limit "
           f"(T² {num(res['t2_limit'])}, Q {sci(res['q_limit'])}). A new blend component shows "
           "as a high Q even where the scores above look familiar.")
rfig = go.Figure()
rfig.add_trace(go.Scatter(x=res["calibration"]["t2"], y=res["calibration"]["q"], mode="markers",
                          name="calibration", text=cal["samples"],
                          hovertemplate="%{text} (calibration)<br>T² %{x:.4g}, Q %{y:.3e}"
                                        "<extra></extra>",
                          marker={"color": COLOURS["calibration"], "size": 7,
                                  "symbol": "circle-open"}))
recent_traces(rfig, res["recent"]["t2"], res["recent"]["q"])
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
                   xaxis_title="Hotelling T² (dimensionless, log scale)",
                   yaxis_title="Q residual (squared preprocessed absorbance units, log scale)",
                   xaxis_type="log", yaxis_type="log",
                   yaxis={"exponentformat": "e", "showexponent": "all"})
st.plotly_chart(rfig, key="cov_residuals")

st.subheader("Share outside the calibration space per week")
weeks = pd.DataFrame(cov["weekly"])
if n["recent"]:
    with_data = weeks[weeks["n"] > 0]
    empty = weeks[weeks["n"] == 0]
    bar = go.Figure(go.Bar(
        x=with_data["week_start"], y=100 * with_data["share"].astype(float),
        name="outside, % of the week's spectra", marker_color=COLOURS["inside"],
        text=[f"{k}/{m}" for k, m in zip(with_data["outside"], with_data["n"])],
        textposition="outside", cliponaxis=False,
        customdata=with_data[["outside", "n"]].to_numpy(),
        hovertemplate="week of %{x|%Y-%m-%d}: %{customdata[0]} of %{customdata[1]} outside"
                      " (%{y:.1f} %)<extra></extra>"))
    if len(empty):
        bar.add_trace(go.Scatter(
            x=empty["week_start"], y=[0] * len(empty), mode="markers",
            name="week without spectra (no data, not 0 %)",
            marker={"symbol": "line-ew-open", "size": 18, "color": COLOURS["limit"],
                    "line": {"width": 2, "color": COLOURS["limit"]}},
            hovertemplate="week of %{x|%Y-%m-%d}: no spectra<extra></extra>"))
    bar.update_layout(template=PLOT_TEMPLATE, height=340, showlegend=True,
                      legend={"orientation": "h", "y": -0.35},
                      yaxis_title="outside (% of the week's spectra)",
                      xaxis_title="week starting Monday (UTC)", yaxis_range=[0, 105])
    st.plotly_chart(bar, key="cov_weekly")
    st.caption("Each bar is labelled outside/all for its week, so a week with 0 % outside "
               "reads 0/n; a week without spectra has no bar and its own marker.")
else:
    st.write("No recent spectra in the window.")

if n["outside"]:
    with st.expander("Recent spectra outside the calibration space"):
        st.dataframe(pd.DataFrame([{"sample": rec["samples"][i], "spectrum": rec["spectrum_ids"][i],
                                    "acquired (UTC)": f"{rec['acquired_at'][i]:%Y-%m-%d %H:%M}",
                                    "T²": num(res["recent"]["t2"][i]),
                                    "Q": sci(res["recent"]["q"][i]),
                                    "checks failed": ", ".join(WORDS[f] for f in rec["flags"][i])}
                                   for i in range(len(rec["samples"])) if rec["outside"][i]]),
                     hide_index=True, key="cov_outside")
