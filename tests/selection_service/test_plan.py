"""`specledger plan` and its service: the forecast of RMSEP against further reference tests,
the target σ_R, the floor σ_r, and the backtest of a forecast against a run's results."""

from __future__ import annotations

import json

import numpy as np
import pytest
from sqlmodel import select

from registry import catalog
from registry.errors import InputError
from registry.precision import LIMIT_FACTOR
from registry.services import planning, references
from registry.services import selection as svc
from registry.storage.engine import session_scope
from registry.storage.models import CalibrationMember
from tests.selection_service.conftest import write_results
from tests.selection_service.test_cli_select import cli
from tests.selection_service.test_selection_with_model import _set_state, with_model  # noqa: F401

RON = catalog.method_of("RON")  # the seeded RON method: cost, r and R (ASTM D2699, catalog)


def _sigma(spec_key: str, level: float) -> float:
    """r or R of the catalog's RON method at ``level`` turned into an SD (ISO 5725-6: /2.77)."""
    return catalog.precision_at(RON[spec_key], level) / LIMIT_FACTOR


def test_plan_json_has_now_forecast_and_to_reach(sel_registry):
    engine, actors, info, url = sel_registry
    res = cli(["plan", "--property", "RON", "--grade", "PREM95", "--budget", "5000",
               "--format", "json"], url)
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["now"]["n"] == len(info["referenced"]) and doc["now"]["rmsecv"] > 0
    added = [r["added"] for r in doc["forecast"]]
    assert added == sorted(added) and len(set(added)) == len(added)
    for row in doc["forecast"]:
        assert set(row) == {"added", "cost", "rmsep", "low", "high"}
        assert row["cost"] == pytest.approx(row["added"] * RON["cost"])
        assert row["low"] <= row["high"]
    # the budget buys floor(5000 / cost) tests, at the catalog's price
    assert doc["budget"]["tests"] == int(5000 // RON["cost"])
    assert int(5000 // RON["cost"]) in added
    # default target: σ_R of the reference method at the calibration's mean level
    level = doc["precision"]["level"]
    assert doc["target"]["value"] == pytest.approx(_sigma("reproducibility", level))
    if doc["to_reach"] is not None:
        assert set(doc["to_reach"]) == {"target", "added", "cost"}
        assert doc["to_reach"]["cost"] == pytest.approx(doc["to_reach"]["added"] * RON["cost"])
    assert doc["verdict"] and isinstance(doc["worth_more_tests"], bool)


def test_floor_never_below_repeatability_and_unreachable_target_says_why(sel_registry):
    engine, actors, info, url = sel_registry
    with session_scope(engine) as s:
        doc = planning.plan_testing(s, actors["lab_manager"], planning.check_plan(
            property_code="RON", grade="PREM95", target=0.01))
    sigma_r = _sigma("repeatability", doc["precision"]["level"])
    assert doc["precision"]["sigma_r"] == pytest.approx(sigma_r)
    assert doc["floor"]["rmsep"] >= sigma_r * (1 - 1e-9)
    # 0.01 lies below σ_r (r = 0.2 for RON, ASTM D2699 precision statement), so below the floor
    assert sigma_r > 0.01
    assert doc["to_reach"] is None and "below the forecast floor" in doc["to_reach_reason"]


def test_text_for_a_lab_manager(sel_registry):
    engine, actors, info, url = sel_registry
    res = cli(["plan", "--property", "ron", "--grade", "PREM95", "--budget", "2000"], url)
    assert res.exit_code == 0, res.output
    assert f"buys {int(2000 // RON['cost'])} tests" in res.output
    assert "repeatability" in res.output and "Floor" in res.output
    assert "does not replace the specification test method" in res.output


@pytest.mark.parametrize("args, word", [
    (["--budget", "0"], "--budget"), (["--budget", "nan"], "--budget"),
    (["--target", "-1"], "--target"), (["--curve", "sideways"], "--curve")])
def test_bad_options_are_refused_before_the_database_is_touched(tmp_path, args, word):
    db = tmp_path / "never.db"
    res = cli(["plan", "--property", "RON", "--grade", "PREM95", *args], str(db))
    assert res.exit_code != 0 and word in res.output
    assert not db.exists()


def test_plan_is_the_lab_managers_and_budget_must_buy_one_test(sel_registry):
    engine, actors, info, url = sel_registry
    res = cli(["plan", "--property", "RON", "--grade", "PREM95"], url, user="otto")
    assert res.exit_code != 0 and "may not" in res.output
    res = cli(["plan", "--property", "RON", "--grade", "PREM95", "--budget", "10"], url)
    assert res.exit_code != 0 and "does not cover one" in res.output


def test_check_plan_refuses_bad_added():
    with pytest.raises(InputError) as err:
        planning.check_plan(property_code="RON", grade="PREM95", added=-1)
    assert err.value.field == "--added"


# --------------------------------------------------------------------------- backtest
def test_backtest_compares_the_forecast_with_the_rmsecv_after_the_results(with_model, tmp_path):
    engine, actors, info, mv = with_model
    _set_state(engine, mv, "active")
    with session_scope(engine) as s:
        run = svc.run_selection(s, actors["lab_manager"], property_codes=["RON"], grade="PREM95",
                                method="kennard-stone", n=6)
        run_id, picked = run.run.id, [r["sample_id"] for r in run.rows]
    with session_scope(engine) as s:
        with pytest.raises(InputError, match="no pick"):
            planning.forecast_backtest(s, actors["auditor"], run_id)
    truth = {}  # the generator's true RON of every imported blend (invented data)
    for pop, ids in ((info["population"], info["ids"]),
                     (info["new_population"], info["new_component"])):
        truth.update(zip(ids, pop.properties["RON"].to_numpy().tolist()))
    path = write_results(tmp_path / "back.csv", picked, "RON", RON["code"],
                         [truth[s] for s in picked])
    with session_scope(engine) as s:
        references.import_references(s, actors["analyst"], path)
    with session_scope(engine) as s:
        out = planning.forecast_backtest(s, actors["auditor"], run_id)
    assert out["added"] == 6 and out["model"] == mv.label
    f = out["forecast"]
    assert f["low"] <= f["high"] and out["inside_band"] == (f["low"] <= out["rmsecv_after"] <= f["high"])
    with session_scope(engine) as s:
        n_cal = len(s.exec(select(CalibrationMember).where(
            CalibrationMember.set_id == mv.calibration_set_id,
            CalibrationMember.role == "cal")).all())
    assert out["n_before"] == n_cal
    assert np.isfinite(out["rmsecv_after"]) and out["rmsecv_after"] > 0

