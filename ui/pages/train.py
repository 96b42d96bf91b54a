"""Train: a draft model version on a frozen calibration set, through the same service as
the command line (``registry.services.models.train_model_version``).

The page builds the preprocessing recipe from a few choices (the steps of
``registry/spectra/preprocessing.py``; the service checks it against the spectra's axis),
picks the family and, for PLS, the cross-validation settings, shows progress while the
version trains, then its RMSECV curve with the chosen number of components marked and
the way on to validation.
"""

from __future__ import annotations

import json

import plotly.graph_objects as go
import streamlit as st

from registry.chemometrics.crossval import SELECTION_RULES
from registry.chemometrics.family_names import ModelFamily
from registry.chemometrics.fitted import DESCRIPTIONS
from registry.chemometrics.folds import FOLD_METHODS
from registry.lifecycle.permissions import Action
from registry.services import models as model_svc
from registry.services import views
from registry.services.calibration import list_calibration_sets
from registry.services.trainers import PLS_DEFAULTS
from ui.common import COLOURS, FAILED, PLOT_TEMPLATE, call, may, require_actor
from ui.format import num, unit_of

require_actor()
st.title("Train a model version")
if not may(Action.MODEL_TRAIN):
    st.info("Training model versions is the analyst's duty; your roles do not include it.")
    st.stop()

sets = call(list_calibration_sets)
if sets is FAILED:
    st.stop()
cat = call(views.catalog)
UNITS = {p["code"]: p["unit"] for p in (cat["properties"] if cat else [])}
sets = [s for s in sets if s["sha256"]]  # frozen: its members and values are fixed by a hash
if not sets:
    st.info("No frozen calibration set yet: a lab manager or analyst freezes one first.")
    st.stop()

FOLD_WORDS = {"venetian": "venetian blinds over the samples", "kfold": "contiguous blocks",
              "loso": "leave one sample out", "random": "random (seeded)"}
RULE_WORDS = {"haaland-thomas": "Haaland–Thomas F-test", "one-se": "one standard error"}


def set_label(s: dict) -> str:
    grade = f", {s['grade']}" if s["grade"] else ""
    return f"{s['name']} ({s['property']}{grade}; {s['n_cal']} calibration, {s['n_val']} validation)"


def recipe_steps(exclude_co2: bool, scatter: str, deriv: str, window: int, polyorder: int,
                 baseline: str, degree: int, centre: bool) -> list[dict]:
    """The recipe as the service takes it: a list of steps, applied in order."""
    steps: list[dict] = []
    if exclude_co2:
        steps.append({"step": "region", "exclude": [model_svc.CO2_BAND_CM1]})
    if baseline == "linear":
        steps.append({"step": "baseline", "kind": "linear"})
    elif baseline == "polynomial":
        steps.append({"step": "baseline", "kind": "polynomial", "degree": degree})
    if scatter != "none":
        steps.append({"step": scatter})
    if deriv != "none":
        steps.append({"step": "savgol", "window_length": window, "polyorder": polyorder,
                      "deriv": {"smoothing only": 0, "first derivative": 1,
                                "second derivative": 2}[deriv]})
    if centre:
        steps.append({"step": "mean_center"})
    return steps


with st.form("train"):
    picked = st.selectbox("Calibration set (frozen)", sets, format_func=set_label,
                          index=len(sets) - 1, key="train_set")
    family = st.selectbox("Model family", [f.value for f in ModelFamily],
                          format_func=lambda f: f"{f}: {DESCRIPTIONS[ModelFamily(f)]}",
                          key="train_family")
    st.markdown("**Preprocessing** (applied in this order)")
    p1, p2, p3 = st.columns(3)
    exclude_co2 = p1.checkbox("Exclude the CO₂ band (2400–2250 cm⁻¹)", value=True,
                              key="train_co2")
    baseline = p1.selectbox("Baseline correction", ["none", "linear", "polynomial"],
                            key="train_baseline")
    degree = p1.number_input("Polynomial degree", min_value=0, max_value=6, value=2,
                             key="train_degree")
    scatter = p2.selectbox("Scatter correction", ["none", "snv", "msc"],
                           format_func={"none": "none", "snv": "standard normal variate",
                                        "msc": "multiplicative scatter correction"}.get,
                           key="train_scatter")
    centre = p2.checkbox("Mean-centre", value=False, key="train_centre")
    deriv = p3.selectbox("Savitzky–Golay filter",
                         ["first derivative", "second derivative", "smoothing only", "none"],
                         key="train_deriv")
    window = p3.number_input("Window (points, odd)", min_value=3, max_value=101, value=11, step=2,
                             key="train_window")
    polyorder = p3.number_input("Polynomial order", min_value=0, max_value=6, value=2,
                                key="train_polyorder")
    st.markdown("**Cross-validation** (PLS)")
    c1, c2, c3, c4 = st.columns(4)
    folds = c1.number_input("Folds", min_value=2, max_value=50, value=PLS_DEFAULTS["folds"],
                            key="train_folds")
    max_components = c2.number_input("Largest number of components", min_value=1, max_value=40,
                                     value=PLS_DEFAULTS["max_components"], key="train_max")
    cv_method = c3.selectbox("Fold assignment", FOLD_METHODS, format_func=FOLD_WORDS.get,
                             key="train_cv_method")
    selection = c4.selectbox("Choice of the number of components", SELECTION_RULES,
                             format_func=RULE_WORDS.get, key="train_selection")
    options_text = st.text_area(
        "Options of the other families (JSON object; see each family's options)", value="",
        key="train_options",
        help="For band, CLS, derived and neighbour models: e.g. {\"band\": [1750, 1700]} for a "
             "band model. Not used for PLS, whose settings are above.")
    submitted = st.form_submit_button("Train")

steps = recipe_steps(exclude_co2, scatter, deriv, int(window), int(polyorder), baseline,
                     int(degree), centre)
with st.expander("The recipe these choices make"):
    st.json(steps)

if submitted:
    kwargs: dict = {"family": family}
    problem = None
    if family == ModelFamily.PLS:
        kwargs.update(recipe=steps, folds=int(folds), max_components=int(max_components),
                      cv_method=cv_method, selection=selection)
    else:
        try:
            options = json.loads(options_text) if options_text.strip() else {}
        except json.JSONDecodeError as exc:
            problem = f"Options of the other families: not valid JSON ({exc.msg}, line {exc.lineno})"
        else:
            if not isinstance(options, dict):
                problem = "Options of the other families: give a JSON object, {...}"
            kwargs["options"] = options
    if problem:
        st.error(problem)
    else:
        with st.status(f"Training a {family} version on {picked['name']}…", expanded=True) as box:
            st.write(f"{picked['n_cal']} calibration samples; cross-validation and the final "
                     "fit run now (a minute or so for a large set).")
            mv = call(model_svc.train_model_version, picked["name"], **kwargs)
            if mv is FAILED:
                box.update(label="Training failed: nothing was stored", state="error")
            else:
                st.session_state["train_result"] = {
                    "label": mv.label, "family": mv.family, "components": mv.n_components,
                    "cv": mv.cv, "property": picked["property"], "set": picked["name"],
                    "unit": UNITS.get(picked["property"])}
                box.update(label=f"Trained {mv.label} (draft)", state="complete", expanded=False)

result = st.session_state.get("train_result")
if result:
    st.subheader(f"{result['label']}: draft, trained on {result['set']}")
    cv = result["cv"] or {}
    curve = cv.get("rmsecv")
    if curve:
        chosen = int(result["components"])
        st.write(f"{chosen} components chosen by the {RULE_WORDS.get(cv['selection_rule'], cv['selection_rule'])} "
                 f"rule; RMSECV there {num(curve[chosen - 1])} ({cv['n_folds']} folds, "
                 f"{FOLD_WORDS.get(cv['method'], cv['method'])}).")
        sizes = list(range(1, len(curve) + 1))
        fig = go.Figure()
        fig.add_trace(go.Scatter(x=sizes, y=curve, mode="lines+markers", name="RMSECV",
                                 line={"color": COLOURS["line"]},
                                 marker={"color": COLOURS["line"], "size": 6}))
        fig.add_trace(go.Scatter(x=[chosen], y=[curve[chosen - 1]], mode="markers",
                                 name=f"chosen: {chosen} components",
                                 marker={"color": COLOURS["marker"], "size": 14,
                                         "symbol": "circle-open", "line": {"width": 3}}))
        fig.update_layout(template=PLOT_TEMPLATE, height=360,
                          legend={"orientation": "h", "yanchor": "bottom", "y": 1.02, "x": 0},
                          xaxis_title="number of PLS components",
                          yaxis_title=f"RMSECV{unit_of(result['unit'])}",
                          xaxis={"dtick": 1})
        st.plotly_chart(fig, key="train_curve")
    else:
        st.write(f"A {result['family']} version has no cross-validation curve; its evidence "
                 "comes from validation.")
    st.info("Next: validate this version on its held-out samples, then submit it for review. "
            "A model result does not replace the specification test method.")
    st.page_link("pages/models.py", label=f"Open {result['label']} on the Models page to validate it",
                 query_params={"version": result["label"]}, icon=":material/fact_check:")
