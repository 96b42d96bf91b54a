"""The Streamlit front end driven through its widgets (AppTest) on a registry with a model in service.

What each page shows is compared with what the services return for the same
registry, and numbers drawn on charts with independent computations (sources
named beside each check).
"""

from __future__ import annotations

import numpy as np
import pytest

from registry.services import models, qc, selection_runs, views
from tests.factories import write_population_csv
from seed_demo.synthetic import generate_population
from tests.ui.helpers import PAGES, array, frame, open_page, plotly_specs, service, signed_in, texts
from ui.common import CAUTION


def sidebar_captions(at) -> list[str]:
    return [c.value for c in at.sidebar.caption]


def test_wrong_password_shows_an_error_and_no_page(ui_reg):
    at = signed_in("analyst", password="not-the-password")
    assert not at.exception
    assert any("authentication failed" in e.value for e in at.error)
    assert [t.value for t in at.title] == ["Specledger"]  # still the sign-in page
    assert not at.dataframe and not at.get("plotly_chart")
    with pytest.raises(ValueError):  # the pages are not even registered before sign-in
        at.switch_page("pages/overview.py")
    assert CAUTION in sidebar_captions(at)


@pytest.mark.parametrize("page", PAGES)
def test_every_page_renders_with_the_caution_and_no_error(ui_reg, page):
    at = open_page(signed_in("lab_manager"), page)
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    assert CAUTION in sidebar_captions(at)
    assert "lena" in at.sidebar.markdown[0].value


def test_sign_out_returns_to_the_sign_in_form(ui_reg):
    at = signed_in("reviewer")
    at.button(key="sign_out").click().run()
    assert [t.value for t in at.title] == ["Specledger"]
    assert at.text_input(key="sign_in_name").value == ""


def test_models_page_lists_the_model_and_draws_its_cv_curve(ui_reg):
    at = open_page(signed_in("auditor"), "models")
    table = frame(at, "RMSECV")
    assert ui_reg.label in table["label"].tolist()
    detail = service(ui_reg, models.model_detail, ui_reg.label)
    spec = next(sp for sp in plotly_specs(at) if sp["data"][0]["name"] == "RMSECV")
    curve, chosen = spec["data"][0], spec["data"][1]
    # the curve is the stored RMSECV per component count, A = 1..max
    assert array(curve["x"]).tolist() == list(range(1, len(detail["cv"]["rmsecv"]) + 1))
    np.testing.assert_allclose(array(curve["y"]), detail["cv"]["rmsecv"])
    assert array(chosen["x"]).tolist() == [detail["components"]]
    np.testing.assert_allclose(array(chosen["y"]), [detail["cv"]["rmsecv"][detail["components"] - 1]])
    # the Q-residual limit's form, as the artifact records it (Box 1954 by default)
    assert detail["q_limit"]["form"] == "box"
    assert any(c.value.startswith("Q-residual limit: Box g·χ²(h)") for c in at.caption)
    # an auditor changes nothing: no lifecycle form is offered
    assert not at.form_submit_button
    assert "active" in frame(at, "signature")["to"].tolist()
    # the validation record shows SEP, RMSEP and bias apart, SEP/σ_R, 1.96·SEP against R
    # and the acceptance rule that judged it (R = 2.77·σ_R, ISO 5725-6)
    validations = frame(at, "acceptance rule")
    [v] = detail["validations"]
    row = validations.iloc[0]
    assert row["acceptance rule"] == v["rule"] and "σ_R = R/2.77" in v["rule"]
    # shown with four significant digits (ui.format.num), never rounded away
    assert float(row["SEP"]) == pytest.approx(v["sep"], rel=5e-4)
    assert float(row["RMSEP"]) == pytest.approx(v["rmsep"], rel=5e-4)
    assert float(row["SEP/σ_R"]) == pytest.approx(v["sep"] / (float(row["R"]) / 2.772), rel=2e-3)
    assert float(row["1.96·SEP"]) == pytest.approx(1.96 * v["sep"], rel=5e-4)


def test_a_signature_action_asks_for_the_password_again(ui_reg):
    at = open_page(signed_in("lab_manager"), "models")
    at.text_input(key="act_retire_reason").input("replaced by a new method")
    at.text_input(key="act_retire_password").input("wrong-password")
    at.form_submit_button(key="FormSubmitter:act_retire-Sign: retire").click().run()
    assert any("signature refused" in e.value for e in at.error)
    assert service(ui_reg, models.model_detail, ui_reg.label)["state"] == "active"
    at.text_input(key="act_retire_password").input("test-password-1")
    at.form_submit_button(key="FormSubmitter:act_retire-Sign: retire").click().run()
    assert not at.error
    assert any("retire signed" in s.value for s in at.success)
    assert service(ui_reg, models.model_detail, ui_reg.label)["state"] == "retired"


def test_coverage_page_plots_calibration_and_recent_points(ui_reg):
    at = open_page(signed_in("reviewer"), "coverage")
    cov = service(ui_reg, views.coverage_map, "RON", "PREM95")
    scatter, residuals, weekly = plotly_specs(at)
    by_name = {t["name"]: t for t in scatter["data"]}
    assert set(by_name) == {"calibration", "recent, inside", "recent, outside"}
    cal_x = array(by_name["calibration"]["x"])
    assert cal_x.size == cov["counts"]["calibration"]
    np.testing.assert_allclose(cal_x, cov["calibration"]["scores"][:, 0])
    n_in, n_out = (array(by_name[k]["x"]).size for k in ("recent, inside", "recent, outside"))
    assert (n_in + n_out, n_out) == (cov["counts"]["recent"], cov["counts"]["outside"])
    assert n_in > 0 and cov["counts"]["calibration"] > 0
    # weekly shares are outside/n of each week with spectra, drawn in percent
    shares = [100 * w["outside"] / w["n"] for w in cov["weekly"] if w["n"]]
    np.testing.assert_allclose(array(weekly["data"][0]["y"]), shares)
    # the T²/Q view carries the same spectra, with the model's limits drawn as lines
    res = {t["name"]: t for t in residuals["data"]}
    np.testing.assert_allclose(array(res["calibration"]["y"]), cov["residuals"]["calibration"]["q"])
    limits = res["99 % limits"]
    assert limits["x"][0] == pytest.approx(cov["residuals"]["t2_limit"])
    assert limits["y"][3] == pytest.approx(cov["residuals"]["q_limit"])


def test_send_list_picks_what_the_budget_buys_and_offers_the_csv(ui_reg):
    at = open_page(signed_in("lab_manager"), "send_list")
    assert at.multiselect(key="sel_properties").value == ["RON"]  # the property in service first
    at.selectbox(key="sel_method").set_value("kennard-stone")
    at.number_input(key="sel_amount").set_value(3000.0)
    at.form_submit_button[0].click().run()
    assert not at.error, [e.value for e in at.error]
    rows = frame(at, "cumulative_cost")
    cost = next(m["cost"] for m in service(ui_reg, views.catalog)["methods"] if m["property"] == "RON")
    # a budget buys whole samples in rank order (README tour: --budget)
    assert len(rows) == int(3000 // cost) and len(rows) * cost <= 3000
    assert rows["rank"].tolist() == list(range(1, len(rows) + 1))
    assert all(isinstance(r, str) and r for r in rows["reason"])
    assert "calibration space" in texts(at)
    csv_text = at.download_button(key="sel_download").proto  # present once a run is shown
    assert csv_text is not None
    runs = service(ui_reg, selection_runs.list_runs)
    assert len(runs) == 1 and runs[0]["status"] == "waiting for results"
    assert frame(at, "status")["status"].tolist() == ["waiting for results"]
    # the picks on the score map, numbered in rank order, at the scores the run used
    sel_map = next(sp for sp in plotly_specs(at) if any(t["name"] == "picks (rank)" for t in sp["data"]))
    picks = next(t for t in sel_map["data"] if t["name"] == "picks (rank)")
    assert list(picks["text"]) == [str(i) for i in range(1, len(rows) + 1)]
    # the coverage figure is labelled an estimate at today's fixed limits
    assert "today's limits kept fixed" in texts(at)


def test_send_list_is_offered_to_lab_managers_only(ui_reg):
    at = open_page(signed_in("analyst"), "send_list")
    assert not at.form_submit_button
    assert any("lab manager" in i.value for i in at.info)


def test_qc_page_draws_three_charts_with_limits_from_the_moving_range(ui_reg):
    at = open_page(signed_in("analyst"), "qc")
    specs = plotly_specs(at)
    assert len(specs) == 3
    doc = service(ui_reg, qc.qc_chart, instrument="IR-100", material="CHECK-95", property_code="RON")
    values = np.array(doc["chart"]["value"])
    result = specs[0]["data"][0]
    np.testing.assert_allclose(array(result["y"]), values)
    # ASTM D6299 / NIST/SEMATECH e-Handbook §6.3.2.2 individuals chart: limits at
    # x̄ ± 3·MR̄/d₂ with d₂ = 1.128 for moving ranges of span 2, baseline = all 20 results here
    mr_bar = np.mean(np.abs(np.diff(values)))
    upper = next(t for t in specs[0]["data"] if t["name"] == "upper limit")
    assert array(upper["y"])[0] == pytest.approx(values.mean() + 3 * mr_bar / 1.128, rel=1e-3)
    names = [t["name"] for t in specs[2]["data"]]
    assert names[:4] == ["EWMA", "centre line", "upper limit", "lower limit"]


def test_due_page_lists_the_model_in_service(ui_reg):
    at = open_page(signed_in("auditor"), "due")
    table = frame(at, "status")
    assert table["model"].tolist() == [ui_reg.label]
    assert table["status"].iloc[0].startswith("due in ")


def test_trace_page_shows_the_trace_and_offers_the_html(ui_reg):
    at = open_page(signed_in("auditor"), "trace")
    pid = ui_reg.prediction_ids[0]
    at.number_input(key="trace_id").set_value(pid)
    at.form_submit_button[0].click().run()
    assert not at.error
    assert at.subheader[0].value.startswith(f"Trace of prediction {pid}")
    assert "<details" in at.html[0].value  # a collapsible tree, not one long code block
    assert at.download_button(key="trace_download").proto.label == "Trace as HTML"
    assert at.download_button(key="trace_download_json").proto.label == "Trace as JSON"


def test_trace_is_not_offered_to_an_analyst(ui_reg):
    at = open_page(signed_in("analyst"), "trace")
    assert not at.exception and not at.error
    assert any("Tracing is for auditors" in i.value for i in at.info)
    assert [b.key for b in at.button] == ["sign_out"]  # no trace form, no verify button


def test_trace_from_a_model_version(ui_reg):
    at = open_page(signed_in("reviewer"), "trace")
    at.radio(key="trace_kind").set_value("a model version")
    at.text_input(key="trace_model").set_value(ui_reg.label)
    at.form_submit_button[0].click().run()
    assert not at.error, [e.value for e in at.error]
    assert ui_reg.label in at.subheader[0].value


def test_auditor_verifies_the_audit_trail(ui_reg):
    at = open_page(signed_in("auditor"), "trace")
    at.button(key="verify_button").click().run()
    assert not at.error, [e.value for e in at.error]
    assert at.success and at.success[0].value.startswith("Intact")


def test_import_stores_uploaded_spectra_and_lists_every_rejected_line(ui_reg, tmp_path):
    pop = generate_population(4, family="gasoline", seed=99)
    path = tmp_path / "new.csv"
    write_population_csv(path, pop, "NEW", "PREM95")
    at = open_page(signed_in("analyst"), "imports")
    at.file_uploader(key="imp_spectra_files").upload("new.csv", path.read_bytes(), "text/csv")
    at.form_submit_button[0].click().run()
    assert not at.error, [e.value for e in at.error]
    assert any(s.value.startswith("4 spectra imported") for s in at.success)

    bad = ("sample_id,property,method,value,unit,lab,tested_at\n"
           "NEW0000,RON,ASTM D2699,abc,,Lab A,2027-02-01T10:00\n"
           "NEW0001,RON,ASTM D2699,95.1,,Lab A,2027-02-01T10:00\n"
           "NEW0002,RON,ASTM D2699,,,Lab A,2027-02-01T10:00\n")
    at.file_uploader(key="imp_ref_file").upload("ron.csv", bad.encode(), "text/csv")
    at.form_submit_button[1].click().run()
    assert not at.exception
    assert len(at.error) == 1 and "nothing of this" in at.error[0].value
    listed = frame(at, "problem")
    assert listed["file"].tolist() == ["ron.csv", "ron.csv"]
    assert listed["line"].tolist() == ["2", "4"]


def test_reviewer_resolves_a_suspect_result_on_the_import_page(ui_reg, tmp_path):
    from registry.services import references

    # Two RON repeats 0.8 apart on one sample: beyond r = 0.2 (ASTM D2699, from memory).
    sample = ui_reg.info["unreferenced"][0]
    path = tmp_path / "repeats.csv"
    path.write_text("sample_id,property,method,value,unit,lab,tested_at\n"
                    f"{sample},RON,ASTM D2699,94.0,,Lab B,2027-04-01T09:00\n"
                    f"{sample},RON,ASTM D2699,94.8,,Lab B,2027-04-02T09:00\n")
    service(ui_reg, references.import_references, path, role="analyst")
    at = open_page(signed_in("reviewer"), "imports")
    table = frame(at, "reason")
    assert set(table["sample"]) == {sample}
    first = int(table["id"].iloc[0])
    at.selectbox(key="res_id").set_value(first)
    at.radio(key="res_decision").set_value("reject")
    at.text_input(key="res_reason").set_value("sample bottle found unsealed")
    at.form_submit_button(key="FormSubmitter:resolve_suspect-Record the decision").click().run()
    assert not at.error, [e.value for e in at.error]
    rows = service(ui_reg, references.list_references, sample=sample)
    assert {r["id"]: r["status"] for r in rows}[first] == "rejected"
