"""Send list: which untested samples to send for reference testing within a budget, the
method proposed for the situation, and what the results are expected to buy."""

from __future__ import annotations

from datetime import datetime, timezone

import pandas as pd
import plotly.graph_objects as pgo
import streamlit as st

from registry.lifecycle.permissions import Action
from registry.lifecycle.states import CURRENT_MODEL_STATES
from registry.services import models as model_svc
from registry.services import planning, revalidation, selection, selection_runs
from registry.services import views
from ui.common import COLOURS, FAILED, PLOT_TEMPLATE, call, may, require_actor, when
from ui.format import num

require_actor()
st.title("Send list")
if not may(Action.SELECTION_RUN):
    st.info("Choosing samples for reference testing is a lab manager's task; your roles do not "
            "include it.")
    st.stop()

cat = call(views.catalog)
if cat is FAILED:
    st.stop()
props = [p["code"] for p in cat["properties"]]
grades = [g["code"] for g in cat["grades"]]
# Offer first the model that most needs new samples: the first one due for revalidation
# (overdue first), else the newest model in service.
usable = call(model_svc.list_models)
usable = [r for r in (usable or []) if r["state"] in CURRENT_MODEL_STATES and r["grade"]]
due = call(revalidation.due_list)
focus = None
if due and due is not FAILED:
    labels = {r["label"]: r for r in usable}
    focus = next((labels[d["label"]] for d in due if d["label"] in labels), None)
if focus is None and usable:
    focus = usable[-1]
if focus is not None:
    props.sort(key=lambda p: p != focus["property"])
    grades.sort(key=lambda g: g != focus["grade"])
RECOMMENDED = "recommended for the situation"
COSTLIEST = "the costliest test's model"
# the services' option names, as this page labels them
NAMES = {"--method": "Method", "--space-property": "Model space", "--budget": "Budget or number",
         "--n": "Budget or number", "--pool": "Candidates", "--property": "Properties to test"}

# Outside the form, so the cost line follows the properties as they are chosen.
c1, c2 = st.columns(2)
chosen = c1.multiselect("Properties to test", props, default=props[:1], key="sel_properties",
                        help="Each picked sample is tested for every property named.")
grade = c2.selectbox("Grade", grades, key="sel_grade")
price = call(selection.sample_price, chosen) if chosen else None
if price:
    st.caption("Cost per sample: " + " + ".join(
        f"{t['method']} ({'/'.join(t['properties'])}) {t['cost']:g}" for t in price["tests"])
        + f" = {price['per_sample']:g} {price['currency']} (a method serving several "
          "properties is charged once)")

with st.form("selection_form"):
    c3, c4 = st.columns(2)
    method = c3.selectbox("Method", [RECOMMENDED, *selection.METHODS], key="sel_method",
                          help="recommended: the method the measured evidence supports for what "
                               "the registry sees; kennard-stone: fill gaps around the current "
                               "calibration; d-optimal: widen it; duplex: a new calibration and "
                               "validation pair; spxy: spread over spectra and predicted values.")
    pool = c4.selectbox("Candidates", list(selection.POOLS), key="sel_pool",
                        help="unreferenced: every untested sample of the grade; outside-coverage: "
                             "only those the current model flags.")
    c5, c6 = st.columns(2)
    mode = c5.radio("Limit by", ["budget", "number of samples"], key="sel_mode", horizontal=True)
    amount = c6.number_input("Budget or number", min_value=1.0, value=3000.0, step=1.0,
                             key="sel_amount")
    space = st.selectbox("Model space", [COSTLIEST, *chosen], key="sel_space",
                         help="With several properties, the picks are made in one current "
                              "model's space.")
    store = st.checkbox("Store the run (picked samples then wait for their results)", value=True,
                        key="sel_store")
    go = st.form_submit_button("Choose samples")


def _ticker(bar):
    def tick(stage: str, done: int, total: int) -> None:
        bar.progress(min(1.0, done / total) if total else 1.0, text=stage)
    return tick


if go:
    kwargs = {"budget": float(amount)} if mode == "budget" else {"n": int(amount)}
    with st.status("Choosing samples…", expanded=False) as status:
        bar = st.progress(0.0, text="loading spectra")
        result = call(selection.run_selection, property_codes=chosen, grade=grade,
                      method=None if method == RECOMMENDED else method, pool=pool, store=store,
                      space_property=None if space == COSTLIEST else space,
                      progress=_ticker(bar), names=NAMES, **kwargs)
        plan = None
        code = result.parameters.get("space_property") if result is not FAILED else None
        if code is not None and result.rows:
            status.update(label="Forecasting the error these results buy…")
            plan = call(planning.plan_testing, planning.check_plan(
                property_code=code, grade=grade, added=len(result.rows),
                budget=float(amount) if mode == "budget" else None), progress=_ticker(bar),
                names=NAMES)
        status.update(label="Done", state="complete" if result is not FAILED else "error")
    if result is not FAILED:
        st.session_state["sel_result"] = {
            "run_id": result.run.id if result.run is not None else None,
            "rows": result.rows, "benefit": result.benefit, "model": result.model_label,
            "pool_size": result.pool_size, "tests": result.tests, "currency": result.currency,
            "total_cost": result.total_cost, "csv": selection_runs.send_list_csv(result.rows),
            "scores_calibration": result.scores_calibration, "scores_pool": result.scores_pool,
            "pool_ids": result.pool_sample_ids, "picked": result.picked_sample_ids,
            "limit": result.calibration_limit, "recommendation": result.recommendation,
            "method": result.parameters["method"], "space_property": code,
            "plan": plan or None, "day": f"{datetime.now(timezone.utc):%Y-%m-%d}"}


def benefit_lines(b: dict) -> list[str]:
    pct = lambda v: "not known (no calibration yet)" if v is None else f"{100 * v:.1f} %"  # noqa: E731
    if not b:
        return []
    lines = [f"Recent production inside the calibration space now: {pct(b.get('inside_share_now'))} "
             f"of {b['n_recent']} spectra of the last {b['recent_window_days']} days "
             f"({b.get('n_outside_now') if b.get('n_outside_now') is not None else '?'} outside; "
             f"the Coverage page counts the same window).",
             f"Estimate once these samples are in, with today's limits kept fixed: "
             f"{pct(b.get('inside_share_after'))} ({b.get('n_brought_inside') or 0} spectra brought "
             "within today's nearest-neighbour limit; spectra failing leverage, T² or Q stay "
             "outside until a refitted model is judged).",
             f"Widest gap ({b['distance']} distance from a recent spectrum to its nearest "
             f"calibration sample, in {b.get('space', 'the selection space')}): "
             f"{num(b.get('largest_gap_now'))} now, {num(b.get('largest_gap_after'))} after."]
    return lines


def forecast_chart(plan: dict) -> None:
    """Expected RMSEP against tests added, with its band, the budget, the target and the picks."""
    unit = f" ({plan['unit']})" if plan["unit"] else " (property units)"
    rows = [{"added": 0, "cost": 0.0, **{k: plan["now"][k] for k in ("rmsep", "low", "high")}},
            *plan["forecast"]]
    x = [r["added"] for r in rows]
    band = f"{plan['band']:.0%} band"
    fig = pgo.Figure()
    fig.add_trace(pgo.Scatter(x=x + x[::-1], y=[r["high"] for r in rows] + [r["low"] for r in rows][::-1],
                             fill="toself", mode="lines", line={"width": 0}, name=band,
                             fillcolor="rgba(47,93,138,0.18)", hoverinfo="skip"))
    fig.add_trace(pgo.Scatter(x=x, y=[r["rmsep"] for r in rows], mode="lines+markers",
                             name="expected RMSEP", line={"color": COLOURS["inside"]},
                             customdata=[r["cost"] for r in rows],
                             hovertemplate="%{x} tests, cost %{customdata:g}: RMSEP %{y:.3g}"))
    target = plan["target"]["value"]
    if target:
        fig.add_hline(y=target, line={"color": COLOURS["outside"], "dash": "dot"},
                      annotation_text=f"target {num(target)} ({plan['target']['source']})")
    if plan["budget"]:
        fig.add_vline(x=plan["budget"]["added"], line={"color": COLOURS["line"], "dash": "dash"},
                      annotation_text=f"budget {plan['budget']['amount']:g} {plan['currency']}")
    after = plan["after"]
    if after:
        fig.add_trace(pgo.Scatter(x=[after["added"]], y=[after["rmsep"]], mode="markers",
                                 name="these picks", error_y={"type": "data", "symmetric": False,
                                                             "array": [after["high"] - after["rmsep"]],
                                                             "arrayminus": [after["rmsep"] - after["low"]]},
                                 marker={"color": COLOURS["marker"], "size": 11, "symbol": "x"}))
    fig.update_layout(template=PLOT_TEMPLATE, height=380,
                      xaxis_title=f"reference tests added (each {plan['cost_per_test']:g} "
                                  f"{plan['currency']})",
                      yaxis_title=f"expected {plan['property']} RMSEP{unit}",
                      legend={"orientation": "h", "y": -0.25})
    st.subheader("What these results are expected to buy")
    now = plan["now"]
    if after:
        st.markdown(f"Expected {plan['property']} RMSEP now **{num(now['rmsep'])}** ({band} "
                    f"{num(now['low'])}–{num(now['high'])}); after these {after['added']} results "
                    f"**{num(after['rmsep'])}** ({num(after['low'])}–{num(after['high'])}).")
    st.markdown(plan["verdict"] + (" " + ("Target reached already." if plan["to_reach"] and
                                          not plan["to_reach"]["added"] else
                                          f"Target: about {plan['to_reach']['added']} more tests, "
                                          f"{plan['to_reach']['cost']:g} {plan['currency']}."
                                          if plan["to_reach"] else
                                          f"Target not reachable: {plan['to_reach_reason']}.")))
    st.plotly_chart(fig, key="sel_forecast")
    for line in plan["cautions"]:
        st.caption(line)


res = st.session_state.get("sel_result")
if res:
    head = (f"{len(res['rows'])} sample(s) from a pool of {res['pool_size']}; tests {res['tests']}; "
            f"total {res['total_cost']:g} {res['currency']}")
    head += (f"; picks made in the space of model {res['model']} ({res['space_property']})"
             if res["model"] else "; no current model (plain PCA)")
    head += f"; stored as run {res['run_id']}" if res["run_id"] else "; preview, not stored"
    st.success(head)
    rec = res["recommendation"]
    if rec:
        used = "used" if rec["followed"] else f"you chose {res['method']} instead"
        st.info(f"Recommended method: **{rec['method']}** ({used}) — {rec['reason']}")
    for line in benefit_lines(res["benefit"]):
        st.markdown(f"- {line}")
    cols = [c for c in selection.SEND_LIST_COLUMNS if c != "tests"]
    if res["plan"]:
        forecast_chart(res["plan"])
    st.dataframe(pd.DataFrame([{c: (", ".join(r[c]) if isinstance(r.get(c), list) else r.get(c))
                                for c in cols} for r in res["rows"]]),
                 hide_index=True, key="sel_table")
    run_part = f"run{res['run_id']}" if res["run_id"] else "preview"
    st.download_button("Download send list (CSV)", res["csv"],
                       file_name=f"send-list-{run_part}-{res['day']}.csv",
                       mime="text/csv", key="sel_download")
    Tc, Tp = res["scores_calibration"], res["scores_pool"]
    if Tp is not None and Tp.shape[1] >= 2:
        rows_of = [res["pool_ids"].index(p) for p in res["picked"]]
        fig = pgo.Figure()
        fig.add_trace(pgo.Scatter(x=Tc[:, 0], y=Tc[:, 1], mode="markers", name="calibration",
                                 marker={"color": COLOURS["calibration"], "symbol": "circle-open"}))
        fig.add_trace(pgo.Scatter(x=Tp[:, 0], y=Tp[:, 1], mode="markers", name="candidate pool",
                                 marker={"color": COLOURS["inside"], "size": 5}))
        fig.add_trace(pgo.Scatter(x=Tp[rows_of, 0], y=Tp[rows_of, 1], mode="markers+text",
                                 name="picks (rank)", text=[str(i + 1) for i in range(len(rows_of))],
                                 textposition="top center",
                                 marker={"color": COLOURS["marker"], "size": 11, "symbol": "x"}))
        if res["limit"] is not None:
            fig.add_trace(pgo.Scatter(x=res["limit"][:, 0], y=res["limit"][:, 1], mode="lines",
                                     name=f"calibration's {selection.MAP_LIMIT_CONFIDENCE:.0%} "
                                          "Hotelling T² limit (these two scores)",
                                     hoverinfo="skip", line={"color": COLOURS["limit"],
                                                             "dash": "dash"}))
        fig.update_layout(template=PLOT_TEMPLATE, height=440,
                          xaxis_title="score 1 of the selection space (no unit)",
                          yaxis_title="score 2 of the selection space (no unit)",
                          legend={"orientation": "h", "y": -0.2})
        st.plotly_chart(fig, key="sel_map")

st.subheader("Stored selection runs")
runs = call(selection_runs.list_runs)
if runs is not FAILED:
    if runs:
        st.dataframe(pd.DataFrame([{
            "run": r["id"], "created (UTC)": when(r["created_at"]), "by": r["by"],
            "properties": ", ".join(r["properties"]), "grade": r["grade"], "method": r["method"],
            "picks": r["picks"], "results back": r["answered_picks"], "status": r["status"],
            "total cost": num(r["total_cost"])} for r in runs]), hide_index=True, key="sel_runs")
        pick = st.selectbox("Results of run", [r["id"] for r in runs], index=len(runs) - 1,
                            key="sel_run_detail")
        detail = call(selection_runs.run_detail, pick)
        if detail is not FAILED:
            st.dataframe(pd.DataFrame([{
                "rank": p["rank"], "sample": p["sample_id"], "tests": p["tests"],
                "results": "; ".join(f"{x['method']}: {num(x['value'])} ({x['status']})"
                                     for x in p["results"]) or "waiting"}
                for p in detail["picks"]]), hide_index=True, key="sel_run_picks")
    else:
        st.write("No stored runs yet.")
