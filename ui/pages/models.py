"""Models: the versions, one version's evidence, and the lifecycle moves the user may make."""

from __future__ import annotations

import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.chemometrics.diagnostics import describe_q_limit
from registry.lifecycle.permissions import LIFECYCLE_PERMISSIONS
from registry.lifecycle.states import DeploymentState, LifecycleAction, allowed_actions
from registry.services import lifecycle
from registry.services import models as model_svc
from registry.services import views
from ui.common import (COLOURS, FAILED, PLOT_TEMPLATE, call, flash, may, require_actor, show_flash,
                       when)

require_actor()
st.title("Model versions")
show_flash()

rows = call(model_svc.list_models)
if rows is FAILED:
    st.stop()
if not rows:
    st.info("No model versions yet: freeze a calibration set and train one.")
    st.stop()
st.dataframe(pd.DataFrame([{
    "label": r["label"], "property": r["property"], "grade": r["grade"], "state": r["state"],
    "components": r["components"],
    "RMSECV": round(r["rmsecv"], 4) if r["rmsecv"] is not None else None,
    "created (UTC)": when(r["created_at"]), "last validated (UTC)": when(r["last_validated_at"])}
    for r in rows]), hide_index=True, key="models_table")

labels = [r["label"] for r in rows]
label = st.selectbox("Version", labels, index=len(labels) - 1, key="models_label")
d = call(model_svc.model_detail, label)
if d is FAILED:
    st.stop()

st.subheader(f"{d['label']}: {d['property']} ({d['state']})")
c = st.columns(4)
c[0].metric("PLS components", d["components"])
c[1].metric("Calibration / validation samples", f"{d['calibration_set']['n_cal']} / "
            f"{d['calibration_set']['n_val']}")
c[2].metric("Author", d["author"] or "")
c[3].metric("Last validated", d["last_validated_at"].strftime("%Y-%m-%d") if d["last_validated_at"] else "never")
st.caption(f"Calibration set {d['calibration_set']['name']} (SHA-256 {d['calibration_set']['sha256'][:16]}…); "
           f"artifact SHA-256 {d['artifact_sha256'][:16]}…"
           + (f"; parent {d['parent']}" if d["parent"] else ""))
st.caption(f"Q-residual limit: {describe_q_limit(d['q_limit'])}")

cv = d["cv"] or {}
rmsecv = cv.get("rmsecv") or []
if rmsecv:
    a = list(range(1, len(rmsecv) + 1))
    chosen = d["components"]
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=a, y=rmsecv, mode="lines+markers", name="RMSECV",
                             line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"]}))
    fig.add_trace(go.Scatter(x=[chosen], y=[rmsecv[chosen - 1]], mode="markers",
                             name=f"chosen A = {chosen}",
                             marker={"color": COLOURS["marker"], "size": 14, "symbol": "diamond"}))
    fig.add_vline(x=chosen, line_dash="dot", line_color=COLOURS["limit"])
    unit = f" ({d['unit']})" if d["unit"] else ""
    fig.update_layout(template=PLOT_TEMPLATE, height=360, xaxis_title="PLS components (A)",
                      yaxis_title=f"RMSECV{unit}", xaxis={"dtick": 1},
                      title=f"Cross-validation ({cv.get('method', '')}, {cv.get('n_folds', '')} folds; "
                            f"rule: {cv.get('selection_rule', '')})")
    st.plotly_chart(fig, key="models_cv")

st.markdown("**Validation records**")
if d["validations"]:
    def _r(value, digits=4):
        return None if value is None else round(value, digits)

    st.dataframe(pd.DataFrame([{
        "id": v["id"], "kind": v["kind"], "passed": v["passed"], "n": v["n"],
        "SEP": _r(v["sep"]), "RMSEP": _r(v["rmsep"]), "bias": _r(v["bias"]),
        "bias p": _r(v["bias_p"]), "R²": _r(v["r2"]), "SEP/σ_R": _r(v["sep_over_sigma_r"], 3),
        "1.96·SEP": _r(v["sep_95"]), "R": _r(v["reproducibility"]),
        "acceptance rule": v["rule"], "by": v["by"], "at (UTC)": when(v["at"]),
        "reasons": "; ".join(v["reasons"] or [])}
        for v in d["validations"]]), hide_index=True, key="models_validations")
    st.caption("SEP: bias-corrected standard deviation of the prediction errors (ISO 12099); "
               "RMSEP: their root mean square. R is a 95 % limit on the difference of two "
               "results, R = 2.77·σ_R (ISO 5725-6), so SEP is compared with σ_R and 1.96·SEP "
               "with R.")
else:
    st.write("Not validated yet.")

st.markdown("**State history**")
st.dataframe(pd.DataFrame([{
    "from": h["from"], "to": h["to"], "by": h["by"], "at (UTC)": when(h["at"]), "reason": h["reason"],
    "signature": (f"{h['signature']['meaning']} by {h['signature']['signer']}"
                  if h["signature"] else "")} for h in d["history"]]),
    hide_index=True, key="models_history")

sigs = call(lifecycle.model_signatures, label)
if sigs is not FAILED and sigs:
    st.markdown("**Electronic signatures**")
    st.dataframe(pd.DataFrame([{
        "id": s["id"], "signer": s["signer"], "meaning": s["meaning"], "reason": s["reason"],
        "signed (UTC)": when(s["signed_at"]), "status": s["status"],
        "problems": "; ".join(s["problems"]), "SHA-256": s["signed_sha256"]} for s in sigs]),
        hide_index=True, key="models_signatures")

st.markdown("**Deployments**")
if d["deployments"]:
    st.dataframe(pd.DataFrame([{
        "instrument": x["instrument"], "state": x["state"], "deployed (UTC)": when(x["deployed_at"]),
        "ended (UTC)": when(x["ended_at"]), "by": x["by"]} for x in d["deployments"]]),
        hide_index=True, key="models_deployments")
else:
    st.write("Not deployed.")

# ---------------------------------------------------------------- lifecycle moves
st.subheader("Actions")
moves = [m for m in allowed_actions(d["state"]) if may(LIFECYCLE_PERMISSIONS[m])]
if not moves:
    st.write(f"Your roles allow no move on a {d['state']} version.")


def done(message: str) -> None:
    flash(message)
    st.rerun()


if LifecycleAction.VALIDATE in moves:
    with st.form("act_validate"):
        st.markdown("**Validate** on the validation members of the version's own calibration set")
        kind = st.selectbox("Kind", ["initial", "local", "general"], key="act_validate_kind")
        if st.form_submit_button("Validate"):
            rec = call(model_svc.validate_model, label, kind=kind)
            if rec is not FAILED:
                done(f"validation record {rec.id}: {'passed' if rec.passed else 'failed'}"
                     + ("" if rec.passed else f" ({'; '.join(rec.reasons)})"))

if LifecycleAction.SUBMIT in moves:
    with st.form("act_submit"):
        st.markdown("**Submit for review** (the author's act; no signature)")
        reason = st.text_input("Note", key="act_submit_reason")
        if st.form_submit_button("Submit"):
            if call(lifecycle.submit_model, label, reason) is not FAILED:
                done(f"{label} submitted for review")

signed = [m for m in (LifecycleAction.APPROVE, LifecycleAction.REJECT, LifecycleAction.ACTIVATE,
                      LifecycleAction.RETIRE) if m in moves]
if signed:
    cat = call(views.catalog)
    serials = [i["serial"] for i in cat["instruments"] if i["active"]] if cat is not FAILED else []
    active_on = [x["instrument"] for x in d["deployments"]
                 if x["state"] == DeploymentState.ACTIVE]
for move in signed:
    with st.form(f"act_{move.value}"):
        st.markdown(f"**{move.value.capitalize()}**: an electronic signature; enter your password "
                    "again to sign")
        instrument = None
        if move == LifecycleAction.ACTIVATE:
            instrument = st.selectbox("Instrument", serials, key="act_activate_instrument")
        if move == LifecycleAction.RETIRE:
            where = st.selectbox("Where", ["every instrument"] + active_on,
                                 key="act_retire_instrument")
            instrument = None if where == "every instrument" else where
        reason = st.text_input("Reason" + (" (required)" if move in (
            LifecycleAction.REJECT, LifecycleAction.RETIRE) else ""), key=f"act_{move.value}_reason")
        password = st.text_input("Password", type="password", key=f"act_{move.value}_password")
        if st.form_submit_button(f"Sign: {move.value}"):
            if move == LifecycleAction.APPROVE:
                out = call(lifecycle.approve_model, label, password=password, reason=reason)
            elif move == LifecycleAction.REJECT:
                out = call(lifecycle.reject_model, label, password=password, reason=reason)
            elif move == LifecycleAction.ACTIVATE:
                out = call(lifecycle.activate_model, label, instrument=instrument,
                           password=password, reason=reason)
            else:
                out = call(lifecycle.retire_model, label, password=password, reason=reason,
                           instrument=instrument)
            if out is not FAILED:
                done(f"{label}: {move.value} signed")
