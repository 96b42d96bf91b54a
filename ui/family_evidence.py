"""Each model family's own evidence on the models page.

The payloads come from ``registry.services.review`` (``model_evidence`` →
``family_evidence`` and ``inputs``; ``spectrum_evidence`` for one spectrum), which
reads them from the fitted artifact. The page draws them here, one function per
family for the version and one for a chosen spectrum; the figures' titles say what
is drawn.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import streamlit as st

from ui.common import COLOURS, PLOT_TEMPLATE
from ui.format import num, unit_of


def _u(unit: str | None) -> str:
    """The unit after a value in running text (nothing for a dimensionless scale)."""
    return f" {unit}" if unit else ""

#: What a look-up is, in words the page and the trace share (registry DESCRIPTIONS).
LOOKUP_STATEMENT = ("This is a look-up of similar tested samples, not a model: a result is the "
                    "mean of the reference values of the nearest calibration samples, and no "
                    "value is given where the nearest one lies beyond the distance limit.")


def _figure(title: str, height: int, **axes) -> go.Figure:
    fig = go.Figure()
    fig.update_layout(template=PLOT_TEMPLATE, height=height, title=title,
                      legend={"orientation": "h", "y": -0.25}, **axes)
    return fig


# --------------------------------------------------------------------------- PLS
def pls_version(ev: dict, prop: str, unit: str | None) -> None:
    curve = ev["cv_curve"]
    rmsecv = curve["rmsecv"]
    if not rmsecv:
        return
    a = list(range(1, len(rmsecv) + 1))
    chosen = curve["chosen"]
    fig = _figure(f"Cross-validation ({curve['method'] or ''}, {curve['n_folds'] or ''} folds; "
                  f"rule: {curve['rule'] or ''})", 360, xaxis_title="components (A, count)",
                  yaxis_title=f"RMSECV{unit_of(unit)}", xaxis={"dtick": 1})
    fig.add_trace(go.Scatter(x=a, y=rmsecv, mode="lines+markers", name="RMSECV",
                             line={"color": COLOURS["line"]}, marker={"color": COLOURS["line"]}))
    fig.add_trace(go.Scatter(x=[chosen], y=[rmsecv[chosen - 1]], mode="markers",
                             name=f"chosen A = {chosen}",
                             marker={"color": COLOURS["marker"], "size": 14, "symbol": "diamond"}))
    fig.add_vline(x=chosen, line_dash="dot", line_color=COLOURS["limit"])
    st.plotly_chart(fig, key="models_cv")


def pls_spectrum(sp: dict, prop: str, unit: str | None) -> None:
    checks = [("leverage", "leverage_limit"), ("t2", "t2_limit"), ("q", "q_limit"),
              ("nn_distance", "nn_limit")]
    st.dataframe(pd.DataFrame([{"check": name, "value": num(sp.get(name)),
                                "limit": num(sp.get(limit))} for name, limit in checks
                               if name in sp]), hide_index=True, key="models_spectrum_checks")


# --------------------------------------------------------------------------- band
def band_version(ev: dict, prop: str, unit: str | None) -> None:
    fam = ev["family_evidence"]
    v, y = np.asarray(fam["calibration_values"]), np.asarray(fam["calibration_y"])
    coef, se = fam["coefficients"], fam["coefficient_se"]
    grid = np.linspace(float(v.min()), float(v.max()), 50)
    line = sum(c * grid ** j for j, c in enumerate(coef))
    measure = fam["measure"]
    band = f"{num(fam['band'][0])}–{num(fam['band'][1])} cm⁻¹"
    fig = _figure(f"Calibration line: band {measure} ({band}) against reference {prop}", 380,
                  xaxis_title=f"band {measure} above the baseline (absorbance"
                              + (" × cm⁻¹)" if measure == "area" else ")"),
                  yaxis_title=f"reference {prop}{unit_of(unit)}")
    fig.add_trace(go.Scatter(x=v, y=y, mode="markers", name="calibration samples",
                             marker={"color": COLOURS["calibration"], "symbol": "circle-open"}))
    fig.add_trace(go.Scatter(x=grid, y=line, mode="lines", name="least-squares line",
                             line={"color": COLOURS["line"]}))
    st.plotly_chart(fig, key="models_band_line")
    stats = fam["statistics"]
    terms = ["intercept β₀", "slope β₁", "quadratic β₂"]
    rows = [(f"{terms[j]} ± standard error", f"{num(c)} ± {num(s)}")
            for j, (c, s) in enumerate(zip(coef, se))]
    rows += [("calibration samples", str(fam["n_samples"])),
             ("SEC (n − degree − 1 degrees of freedom)", num(stats.get("sec"))),
             ("R²", num(stats.get("r2"))),
             (f"band {measure} range of the calibration", f"{num(fam['value_min'])} – "
                                                          f"{num(fam['value_max'])}"),
             ("baseline anchors (cm⁻¹)", f"{num(fam['anchors'][0])}, {num(fam['anchors'][1])}")]
    st.dataframe(pd.DataFrame(rows, columns=["calibration fit", "value"]), hide_index=True,
                 key="models_band_fit")


def band_spectrum(sp: dict, prop: str, unit: str | None) -> None:
    fig = _figure(f"Band region of {sp['sample']}: absorbance, baseline anchors and baseline",
                  380, xaxis_title="wavenumber (cm⁻¹)", yaxis_title="absorbance",
                  xaxis={"autorange": "reversed"})
    fig.add_trace(go.Scatter(x=sp["axis"], y=sp["absorbance"], mode="lines+markers",
                             name="spectrum", line={"color": COLOURS["inside"]}))
    fig.add_trace(go.Scatter(x=sp["axis"], y=sp["baseline"], mode="lines", name="baseline",
                             line={"color": COLOURS["limit"], "dash": "dash"}))
    fig.add_trace(go.Scatter(x=sp["anchors"], y=sp["anchor_absorbance"], mode="markers",
                             name="baseline anchors",
                             marker={"color": COLOURS["marker"], "size": 11, "symbol": "x"}))
    for edge in sp["band"]:
        fig.add_vline(x=edge, line_dash="dot", line_color=COLOURS["limit"])
    st.plotly_chart(fig, key="models_band_spectrum")
    st.caption(f"Band {sp['measure']} above the baseline: {num(sp['band_value'])}; "
               f"{prop} from the calibration line: {num(sp['y_pred'])}{_u(unit)}. Dotted lines: "
               "the band limits.")


# --------------------------------------------------------------------------- CLS
def cls_version(ev: dict, prop: str, unit: str | None) -> None:
    fam = ev["family_evidence"]
    names = fam.get("outputs") or [str(j) for j in range(len(fam["K"]))]
    fig = _figure(f"Component spectra (rows of K, {fam['k_source'].replace('_', ' ')}): "
                  "absorbance of one concentration unit", 380,
                  xaxis_title="wavenumber (cm⁻¹)", yaxis_title="absorbance per unit",
                  xaxis={"autorange": "reversed"})
    palette = [COLOURS["inside"], COLOURS["outside"], COLOURS["line"], COLOURS["calibration"]]
    for j, (name, row) in enumerate(zip(names, fam["K"])):
        fig.add_trace(go.Scatter(x=fam["axis"], y=row, mode="lines", name=name,
                                 line={"color": palette[j % len(palette)]}))
    st.plotly_chart(fig, key="models_cls_k")
    st.dataframe(pd.DataFrame([
        ("components", ", ".join(names)),
        ("condition number of K (rows scaled to unit length)",
         f"{num(fam['condition_number'])} (limit {num(fam['condition_limit'])})"),
        (f"residual limit Q at {num(fam['confidence'] * 100)} %", num(fam["q_limit"])),
        ("baseline term", fam["baseline"]), ("non-negative concentrations",
                                             "yes" if fam["non_negative"] else "no"),
        ("calibration spectra", str(fam["n_samples"]))], columns=["K matrix", "value"]),
        hide_index=True, key="models_cls_settings")


def cls_spectrum(sp: dict, prop: str, unit: str | None) -> None:
    fig = _figure(f"{sp['sample']}: measured spectrum, CLS fit and residual", 420,
                  xaxis_title="wavenumber (cm⁻¹)", yaxis_title="absorbance (preprocessed)",
                  xaxis={"autorange": "reversed"})
    fig.add_trace(go.Scatter(x=sp["axis"], y=sp["measured"], mode="lines", name="measured",
                             line={"color": COLOURS["inside"]}))
    fig.add_trace(go.Scatter(x=sp["axis"], y=sp["fitted"], mode="lines", name="fit ĉK + b̂G",
                             line={"color": COLOURS["line"], "dash": "dash"}))
    fig.add_trace(go.Scatter(x=sp["axis"], y=sp["residual"], mode="lines", name="residual",
                             line={"color": COLOURS["outside"]}))
    st.plotly_chart(fig, key="models_cls_fit")
    names = sp.get("outputs") or [str(j) for j in range(len(sp["concentrations"]))]
    rows = [(f"{name} concentration", num(c)) for name, c in zip(names, sp["concentrations"])]
    rows += [("residual Q = ‖x − ĉK − b̂G‖²", f"{num(sp['q'])} (limit {num(sp['q_limit'])})"),
             ("condition number of K", f"{num(sp['condition_number'])} "
                                       f"(limit {num(sp['condition_limit'])})"),
             ("flags", ", ".join(sp["flags"]) or "none")]
    st.dataframe(pd.DataFrame(rows, columns=["fit", "value"]), hide_index=True,
                 key="models_cls_result")


# --------------------------------------------------------------------------- derived
def derived_version(ev: dict, prop: str, unit: str | None) -> None:
    fam = ev["family_evidence"]
    st.markdown(f"Formula: `{prop} = {fam['formula']}`")
    st.dataframe(pd.DataFrame([{
        "input": i["code"], "version used now": i["current"] or "none in use",
        "its family": i["current_family"], "its state": i["current_state"],
        "its SEP now": num(i["current_sep"]), "version at training": i["trained_with"],
        "SEP at training (used for u)": num(i["sep_at_training"]),
        "changed since training": "yes" if i["changed"] else "no"} for i in ev["inputs"]]),
        hide_index=True, key="models_derived_inputs")
    st.caption("The uncertainty of a result is propagated to first order from the inputs' "
               "SEPs, the inputs taken as independent: u² = Σ (∂f/∂xᵢ)²·SEPᵢ² (JCGM 100:2008, "
               "§5.1.2). A changed input version makes the derived version due.")


def derived_spectrum(sp: dict, prop: str, unit: str | None) -> None:
    st.dataframe(pd.DataFrame([{
        "input": i["code"], "result": num(i["value"]),
        "version": (sp["inputs_used"].get(i["code"]) or {}).get("model"),
        "∂f/∂x": num(i["derivative"]), "SEP": num(i["sep"]),
        "(∂f/∂x·SEP)²": num(i["contribution"])} for i in sp["inputs"]]),
        hide_index=True, key="models_derived_terms")
    st.markdown(f"{prop} = {num(sp['y_pred'])}{_u(unit)}, propagated uncertainty "
                f"u = {num(sp['uncertainty'])}{_u(unit)} (first order)")


# --------------------------------------------------------------------------- neighbours
def neighbours_version(ev: dict, prop: str, unit: str | None) -> None:
    fam = ev["family_evidence"]
    st.info(LOOKUP_STATEMENT)
    space = ("Mahalanobis distance on PCA scores "
             f"({fam['n_components']} components, each scaled to unit variance)"
             if fam["space"] == "scores" else "Euclidean distance between preprocessed spectra")
    y = np.asarray(fam["calibration_y"])
    st.dataframe(pd.DataFrame([
        ("neighbours averaged (k)", str(fam["n_neighbors"])),
        ("weights", fam["weights"]), ("space", space),
        ("distance limit", num(fam["distance_limit"]) + (
            " (set by the lab)" if fam["distance_limit_given"]
            else " (largest nearest-neighbour distance within the calibration set)")),
        ("tested samples to look up", str(fam["n_samples"])),
        (f"their {prop} range", f"{num(y.min())} – {num(y.max())}{_u(unit)}")],
        columns=["look-up", "value"]), hide_index=True, key="models_lookup_settings")


def neighbours_spectrum(sp: dict, prop: str, unit: str | None) -> None:
    names = sp.get("samples") or [str(i) for i in sp["neighbour_index"]]
    st.dataframe(pd.DataFrame({"neighbour sample": names,
                               "distance": [num(d) for d in sp["neighbour_distance"]],
                               f"reference {prop}{unit_of(unit)}":
                                   [num(v) for v in sp["neighbour_value"]]}),
                 hide_index=True, key="models_lookup_neighbours")
    value = ("no value: the nearest tested sample lies beyond the distance limit"
             if sp["y_pred"] is None else f"looked-up {prop} {num(sp['y_pred'])}{_u(unit)}")
    st.markdown(f"{value}; spread of the neighbours' values (max − min) {num(sp['spread'])}"
                f"{_u(unit)}, their SD {num(sp['sd'])}{_u(unit)}; nearest distance "
                f"{num(sp['neighbour_distance'][0])} against the limit {num(sp['distance_limit'])}")


#: (payload, property code, the property's unit or None)
Renderer = Callable[[dict, str, "str | None"], None]
#: family → (version evidence, one spectrum's evidence)
RENDERERS: dict[str, tuple[Renderer, Renderer]] = {
    "pls": (pls_version, pls_spectrum),
    "band": (band_version, band_spectrum),
    "cls": (cls_version, cls_spectrum),
    "derived": (derived_version, derived_spectrum),
    "neighbours": (neighbours_version, neighbours_spectrum),
}
#: The spectrum each family's evidence opens on: a band is shown on a typical calibration
#: spectrum; a look-up of a calibration sample would find itself, so the others open on
#: a validation sample.
OPENS_ON: dict[str, str] = {"band": "calibration"}


def default_choice(family: str, spectra: list[dict[str, Any]]) -> int:
    want = OPENS_ON.get(family, "validation")
    return next((k for k, s in enumerate(spectra) if s["kind"] == want), 0)
