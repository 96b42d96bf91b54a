"""Models: the versions, one version's evidence, and the lifecycle moves the user may make."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from registry.chemometrics.diagnostics import describe_q_limit
from registry.lifecycle.permissions import LIFECYCLE_PERMISSIONS
from registry.lifecycle.states import DeploymentState, LifecycleAction, allowed_actions
from registry.services import lifecycle
from registry.services import models as model_svc
from registry.services import review, views
from ui.common import (COLOURS, FAILED, PLOT_TEMPLATE, call, flash, may, require_actor, show_flash,
                       when)
from ui.family_evidence import RENDERERS, default_choice
from ui.format import num, unit_of

require_actor()
st.title("Model versions")
show_flash()

queue = call(review.review_queue)
if queue is not FAILED:
    st.subheader("Review queue")
    # the same page links the Train page uses; the version is in the query string
    for q in queue:
        st.page_link("pages/models.py", query_params={"version": q["label"]},
                     label=f"{q['label']}: waiting for {q['waiting_for']} since {when(q['since'])} "
                           f"({q['property']}, {q['grade'] or 'all grades'}; author {q['author']})")
    if not queue:
        st.write("No version waits for validation or approval.")

rows = call(model_svc.list_models)
if rows is FAILED:
    st.stop()
if not rows:
    st.info("No model versions yet: freeze a calibration set and train one.")
    st.stop()
st.subheader("All versions")
st.dataframe(pd.DataFrame([{
    "label": r["label"], "property": r["property"], "grade": r["grade"], "family": r["family"],
    "state": r["state"], "components": r["components"], "RMSECV": num(r["rmsecv"]),
    "created (UTC)": when(r["created_at"]), "last validated (UTC)": when(r["last_validated_at"])}
    for r in rows]), hide_index=True, key="models_table")

labels = [r["label"] for r in rows]
asked = st.query_params.get("version")
if asked in labels and st.session_state.get("models_asked") != asked:
    # a link that names a version (review queue, Train page) selects it once; the choice
    # stays the user's afterwards
    st.session_state["models_label"] = asked
    st.session_state["models_asked"] = asked
label = st.selectbox("Version", labels, index=len(labels) - 1, key="models_label")
d = call(model_svc.model_detail, label)
if d is FAILED:
    st.stop()
ev = call(review.model_evidence, label)
if ev is FAILED:
    st.stop()
family = str(ev["family"])
show_version, show_spectrum = RENDERERS[family]

st.subheader(f"{d['label']}: {d['property']} ({d['state']})")
st.info(f"Family {family}: {ev['description']}")
for w in ev["warnings"]:
    st.warning(w)
c = st.columns(4)
c[0].metric("Components" if family == "pls" else "Fitted parameters", d["components"])
c[1].metric("Calibration / validation samples", f"{d['calibration_set']['n_cal']} / "
            f"{d['calibration_set']['n_val']}")
c[2].metric("Author", d["author"] or "")
c[3].metric("Last validated", d["last_validated_at"].strftime("%Y-%m-%d") if d["last_validated_at"] else "never")
st.caption(f"Calibration set {d['calibration_set']['name']} (SHA-256 {d['calibration_set']['sha256'][:16]}…); "
           f"artifact SHA-256 {d['artifact_sha256'][:16]}…"
           + (f"; parent {d['parent']}" if d["parent"] else ""))
if d["q_limit"] is not None:
    st.caption(f"Q-residual limit: {describe_q_limit(d['q_limit'])}")

unit = unit_of(d["unit"])
prop = d["property"]
cvp, val = ev["cross_validation"], ev["validation_set"]
sets = [(name, part, colour, symbol) for name, part, colour, symbol in (
    ("cross-validation", cvp, COLOURS["calibration"], "circle-open"),
    ("validation set", val, COLOURS["inside"], "circle")) if part is not None]
if sets:
    st.markdown("**Predicted against reference**")
    lo = min(float(np.nanmin(np.r_[p["reference"], p["predicted"]])) for _, p, _, _ in sets)
    hi = max(float(np.nanmax(np.r_[p["reference"], p["predicted"]])) for _, p, _, _ in sets)
    fig = go.Figure()
    for name, part, colour, symbol in sets:
        fig.add_trace(go.Scatter(x=part["reference"], y=part["predicted"], mode="markers", name=name,
                                 text=part["sample"], marker={"color": colour, "symbol": symbol}))
    fig.add_trace(go.Scatter(x=[lo, hi], y=[lo, hi], mode="lines", name="identity (ŷ = y)",
                             line={"color": COLOURS["limit"], "dash": "dash", "width": 1}))
    fig.update_layout(template=PLOT_TEMPLATE, height=420, xaxis_title=f"reference {prop}{unit}",
                      yaxis_title=f"predicted {prop}{unit}", legend={"orientation": "h", "y": -0.25})
    st.plotly_chart(fig, key="models_pred_ref")
    r1, r2 = st.columns(2)
    for col, (xkey, xtitle, key) in zip((r1, r2), (
            ("reference", f"reference {prop}{unit}", "models_resid_ref"),
            ("acquired_at", "spectrum acquired (UTC)", "models_resid_time"))):
        rf = go.Figure()
        for name, part, colour, symbol in sets:
            rf.add_trace(go.Scatter(x=part[xkey], y=part["predicted"] - part["reference"],
                                    mode="markers", name=name, text=part["sample"],
                                    marker={"color": colour, "symbol": symbol}))
        rf.add_hline(y=0, line_color=COLOURS["limit"], line_dash="dash")
        rf.update_layout(template=PLOT_TEMPLATE, height=340, xaxis_title=xtitle,
                         yaxis_title=f"residual ŷ − y{unit}", legend={"orientation": "h", "y": -0.35})
        col.plotly_chart(rf, key=key)
    without = int(np.count_nonzero(~np.isfinite(val["predicted"]))) if val is not None else 0
    st.caption(("Cross-validation: each calibration spectrum predicted by the model fitted "
                "without its fold, at the chosen size (stored at training). " if cvp is not None
                else "")
               + "Validation set: the version's own validation samples predicted now, "
               "replicates averaged."
               + (f" {without} validation sample(s) got no value and are not drawn." if without
                  else ""))

st.markdown(f"**Evidence of the {family} family**")
show_version(ev, prop, d["unit"])
spectra = ev["spectra"]
if spectra:
    choice = st.selectbox("Spectrum to explain", range(len(spectra)),
                          index=default_choice(family, spectra),
                          format_func=lambda k: spectra[k]["label"], key=f"models_spectrum_{label}")
    sp = call(review.spectrum_evidence, label, spectra[choice]["spectrum_id"])
    if sp is not FAILED:
        ref = spectra[choice]["reference"]
        st.caption(f"Spectrum {sp['spectrum_id']} of sample {sp['sample']}"
                   + (f"; reference {prop} {num(ref)}{unit}" if ref is not None else "")
                   + ". A model result does not replace the specification test method.")
        show_spectrum(sp, prop, d["unit"])

st.markdown("**Statistics beside the reference method's precision**")
lv, pr = ev["latest_validation"], ev["precision"]
stats = [("reference method", pr["method"] or "none active"),
         ("level (mean reference)", num(pr["level"])),
         ("r (repeatability limit)", num(pr["r"])), ("R (reproducibility limit)", num(pr["R"])),
         ("σ_R = R/2.77", num(pr["sigma_R"]))]
if lv is not None:
    stats += [("validation record", f"{lv['id']} ({lv['kind']}, n = {lv['n']}, by {lv['by']})"),
              ("SEP", num(lv["sep"])), ("RMSEP", num(lv["rmsep"])), ("bias", num(lv["bias"])),
              ("bias p", num(lv["bias_p"])), ("R²", num(lv["r2"])),
              ("SEP/σ_R", num(lv["sep_over_sigma_r"])), ("1.96·SEP (compare with R)", num(lv["sep_95"])),
              ("acceptance rule", lv["rule"]),
              ("verdict", "passed" if lv["passed"] else "failed: " + "; ".join(lv["reasons"]))]
else:
    stats.append(("verdict", "not validated yet"))
st.dataframe(pd.DataFrame(stats, columns=["", f"value{unit}"]), hide_index=True,
             key="models_stats")

st.markdown("**Validation records**")
if d["validations"]:
    st.dataframe(pd.DataFrame([{
        "id": v["id"], "kind": v["kind"], "passed": v["passed"], "n": v["n"],
        "SEP": num(v["sep"]), "RMSEP": num(v["rmsep"]), "bias": num(v["bias"]),
        "bias p": num(v["bias_p"]), "R²": num(v["r2"]), "SEP/σ_R": num(v["sep_over_sigma_r"]),
        "1.96·SEP": num(v["sep_95"]), "R": num(v["reproducibility"]),
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

# ---------------------------------------------------------------- compare two versions
st.subheader("Compare with another version")
others = [x for x in labels if x != label]
if others:
    other = st.selectbox("Other version", others, index=len(others) - 1, key="models_compare")
    cmp = call(review.compare_versions, other, label)
    if cmp is not FAILED:
        a, b = cmp["a"], cmp["b"]

        def column(v):
            cs, vd = v["calibration_set"], v["validation"] or {}
            rng = cs["range"]
            return [v["state"], v["family"], v["components"], v["author"], num(v["rmsecv_at_chosen"]),
                    num(vd.get("sep")), num(vd.get("rmsep")), num(vd.get("bias")),
                    num(vd.get("sep_over_sigma_r")),
                    "" if not vd else ("passed" if vd["passed"] else "failed"),
                    cs["name"], cs["n_cal"], cs["n_val"],
                    f"{num(rng[0])} – {num(rng[1])}" if rng else "", v["artifact_sha256"][:16] + "…"]

        rows_cmp = ["state", "family", "components", "author", f"RMSECV at chosen size{unit}",
                    f"SEP{unit}", f"RMSEP{unit}", f"bias{unit}", "SEP/σ_R", "latest verdict",
                    "calibration set", "calibration samples", "validation samples",
                    f"calibration range{unit}", "artifact SHA-256"]
        st.dataframe(pd.DataFrame({"": rows_cmp, a["label"]: [str(x) for x in column(a)],
                                   b["label"]: [str(x) for x in column(b)]}),
                     hide_index=True, key="models_compare_table")
        cf = go.Figure()
        for v, colour, dash in ((a, COLOURS["calibration"], "dash"), (b, COLOURS["line"], "solid")):
            if v["rmsecv"]:
                cf.add_trace(go.Scatter(x=list(range(1, len(v["rmsecv"]) + 1)), y=v["rmsecv"],
                                        mode="lines+markers", name=v["label"],
                                        line={"color": colour, "dash": dash}))
        cf.update_layout(template=PLOT_TEMPLATE, height=320, xaxis_title="components (A, count)",
                         yaxis_title=f"RMSECV{unit}", xaxis={"dtick": 1})
        st.plotly_chart(cf, key="models_compare_cv")
        if cmp["same_set"]:
            st.write("Both versions were trained on the same calibration set.")
        else:
            st.markdown(f"Calibration samples in {b['label']} and not in {a['label']} "
                        f"(added, {len(cmp['added'])}): {', '.join(cmp['added']) or 'none'}  \n"
                        f"In {a['label']} and not in {b['label']} (removed, "
                        f"{len(cmp['removed'])}): {', '.join(cmp['removed']) or 'none'}")

# ---------------------------------------------------------------- lifecycle moves
st.subheader("Actions")
moves = [m for m in allowed_actions(d["state"]) if may(LIFECYCLE_PERMISSIONS[m])]
if LifecycleAction.APPROVE in moves:
    approval = call(review.approval_status, label)
    if approval is FAILED or not approval["allowed"]:
        moves.remove(LifecycleAction.APPROVE)
        if approval is not FAILED:
            st.info(f"Approval is not offered: {approval['reason']}.")
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
