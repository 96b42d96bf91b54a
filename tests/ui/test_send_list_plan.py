"""The send list page: the method recommended for the situation, the model space named, the
calibration's limit on the score map, the cost line per property, the currency column, and
the forecast of what the results buy (curve, band, budget, target)."""

from __future__ import annotations

import numpy as np
import pytest

from registry import catalog
from registry.chemometrics.diagnostics import hotelling_t2_limit
from registry.services import planning, selection_runs
from tests.ui.helpers import array, frame, open_page, plotly_specs, service, signed_in, texts

RON = catalog.method_of("RON")


def test_recommended_run_shows_the_recommendation_forecast_and_limits(ui_reg):
    at = open_page(signed_in("lab_manager"), "send_list")
    # the cost line follows the properties chosen, before the form is sent
    assert f"{RON['code']} (RON) {RON['cost']:g}" in texts(at)
    at.multiselect(key="sel_properties").set_value(["RON", "MON"]).run()
    mon = catalog.method_of("MON")
    assert f"= {RON['cost'] + mon['cost']:g} USD" in texts(at)
    at.multiselect(key="sel_properties").set_value(["RON"]).run()
    assert at.selectbox(key="sel_method").value == "recommended for the situation"
    at.number_input(key="sel_amount").set_value(2000.0)
    at.form_submit_button[0].click().run()
    assert not at.error, [e.value for e in at.error]
    shown = texts(at)
    assert "Recommended method:" in shown and "(used)" in shown
    assert f"space of model {ui_reg.label} (RON)" in shown
    rows = frame(at, "cumulative_cost")
    assert set(rows["currency"]) == {"USD"}  # catalog prices in USD (registry.catalog)
    assert len(rows) == int(2000 // RON["cost"])
    specs = plotly_specs(at)
    # the score map carries the calibration's T² ellipse: points on it sit at the limit
    sel_map = next(sp for sp in specs if any(t["name"] == "picks (rank)" for t in sp["data"]))
    cal = next(t for t in sel_map["data"] if t["name"] == "calibration")
    ring = next(t for t in sel_map["data"] if "Hotelling" in t["name"])
    T = np.column_stack([array(cal["x"]), array(cal["y"])])
    E = np.column_stack([array(ring["x"]), array(ring["y"])])
    d = E - T.mean(axis=0)
    t2 = np.einsum("ij,jk,ik->i", d, np.linalg.inv(np.cov(T, rowvar=False)), d)
    # Tracy, Young & Mason (1992) limit of a new observation, here via scipy's F quantile
    np.testing.assert_allclose(t2, hotelling_t2_limit(T.shape[0], 2, 0.99), rtol=1e-6)
    # the forecast: curve, band, budget and target, as the planning service gives them
    fc = next(sp for sp in specs if any(t["name"] == "expected RMSEP" for t in sp["data"]))
    plan = service(ui_reg, planning.plan_testing, planning.check_plan(
        property_code="RON", grade="PREM95", budget=2000.0, added=len(rows)), role="lab_manager")
    curve = next(t for t in fc["data"] if t["name"] == "expected RMSEP")
    np.testing.assert_allclose(array(curve["y"])[1:], [r["rmsep"] for r in plan["forecast"]])
    assert any(t["name"] == "80% band" for t in fc["data"])
    lines = fc["layout"]["shapes"]
    assert any(s["x0"] == plan["budget"]["added"] for s in lines)
    assert any(s["y0"] == pytest.approx(plan["target"]["value"]) for s in lines)
    assert "after these" in shown and "does not replace the specification test method" in texts(at)


def test_a_chosen_method_is_kept_and_the_recommendation_says_so(ui_reg):
    at = open_page(signed_in("lab_manager"), "send_list")
    at.selectbox(key="sel_method").set_value("d-optimal")
    at.number_input(key="sel_amount").set_value(1000.0)
    at.checkbox(key="sel_store").uncheck()
    at.form_submit_button[0].click().run()
    assert not at.error, [e.value for e in at.error]
    assert "you chose d-optimal instead" in texts(at)
    assert service(ui_reg, selection_runs.list_runs) == []  # a preview stores nothing
