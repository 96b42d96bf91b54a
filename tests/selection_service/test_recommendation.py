"""The method `select` proposes for the situation it sees, in one line, and the user's own choice."""

from __future__ import annotations

import csv
import io

import pytest

from registry.errors import InputError
from registry.selection.recommend import OUTSIDE_SHARE_MOVED
from registry.services import selection as svc
from registry.services.selection_runs import send_list_csv
from registry.storage.engine import session_scope
from tests.selection_service.test_cli_select import cli
from tests.selection_service.test_selection_with_model import _set_state, with_model  # noqa: F401


def _run(engine, actor, **kw):
    kw.setdefault("property_codes", ["RON"])
    with session_scope(engine) as s:
        return svc.run_selection(s, actor, grade="PREM95", store=False, n=5, **kw)


def test_without_a_model_kennard_stone_is_proposed_and_used(sel_registry):
    engine, actors, info, url = sel_registry
    res = _run(engine, actors["lab_manager"])
    rec = res.recommendation
    assert res.parameters["method"] == rec["method"] == "kennard-stone" and rec["followed"]
    assert "\n" not in rec["reason"] and "no model predicting the pool" in rec["reason"]
    assert rec["outside_share"] == 0.0


def test_with_a_model_the_rule_follows_the_outside_share(with_model):
    engine, actors, info, mv = with_model
    _set_state(engine, mv, "active")
    res = _run(engine, actors["lab_manager"])
    rec = res.recommendation
    share = rec["outside_share"]
    assert rec["method"] == ("spxy" if share >= OUTSIDE_SHARE_MOVED else "kennard-stone")
    assert res.parameters["method"] == rec["method"]
    assert f"{share:.0%}" in rec["reason"] and "\n" not in rec["reason"]
    # a chosen method is kept; the recommendation says it was not used
    other = _run(engine, actors["lab_manager"], method="d-optimal")
    assert other.parameters["method"] == "d-optimal" and not other.recommendation["followed"]


def test_spxy_runs_on_the_models_values_and_needs_a_model(sel_registry, with_model):
    engine, actors, info, mv = with_model
    with pytest.raises(InputError) as err:  # the model is still a draft: not current
        _run(engine, actors["lab_manager"], method="spxy")
    assert err.value.field == "--method"
    _set_state(engine, mv, "active")
    res = _run(engine, actors["lab_manager"], method="spxy")
    assert len(res.rows) == 5 and "predicted value" in res.rows[-1]["reason"]


def test_one_leverage_per_row_and_a_currency_column(with_model):
    engine, actors, info, mv = with_model
    _set_state(engine, mv, "active")
    res = _run(engine, actors["lab_manager"], method="d-optimal")
    for row in res.rows:
        # the column is the model's own prediction-time leverage, the one its check uses
        assert row["leverage"] == pytest.approx(row["diagnostics"]["RON"]["leverage"])
        assert "leverage" not in row["reason"] or "limit" in row["reason"]
    rows = list(csv.DictReader(io.StringIO(send_list_csv(res.rows))))
    # the catalog prices its methods in USD (registry.catalog, "Costs are invented planning figures in USD")
    assert {r["currency"] for r in rows} == {"USD"}
    assert "prediction-time leverage" in res.parameters["leverage"]


def test_model_space_defaults_to_the_costliest_test_and_can_be_chosen():
    a, b = object(), object()
    charges = [svc.MethodCharge("ASTM D2699", 250.0, "USD", ["RON"]),
               svc.MethodCharge("ASTM D4052", 60.0, "USD", ["DENSITY"])]
    req = svc.check_request(property_codes=["DENSITY", "RON"], grade="PREM95", n=3)
    assert svc._space_model(req, {"DENSITY": a, "RON": b}, charges) is b
    assert svc._space_model(req, {"DENSITY": a, "RON": None}, charges) is a
    chosen = svc.check_request(property_codes=["DENSITY", "RON"], grade="PREM95", n=3,
                               space_property="density")
    assert svc._space_model(chosen, {"DENSITY": a, "RON": b}, charges) is a
    with pytest.raises(InputError) as err:
        svc._space_model(chosen, {"DENSITY": None, "RON": b}, charges)
    assert err.value.field == "--space-property"
    with pytest.raises(InputError) as err:
        svc.check_request(property_codes=["RON"], grade="PREM95", n=3, space_property="MON")
    assert err.value.field == "--space-property"


def test_cli_says_what_it_recommends_and_what_the_picks_are_expected_to_buy(sel_registry,
                                                                             with_model):
    engine, actors, info, url = sel_registry
    _set_state(engine, with_model[3], "active")
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--n", "4", "--dry-run"], url)
    assert res.exit_code == 0, res.output
    assert "recommended method:" in res.output and "(used)" in res.output
    assert "expected RON RMSEP: now" in res.output and "after these 4 results" in res.output
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--n", "4", "--dry-run",
               "--method", "duplex", "--no-forecast"], url)
    assert res.exit_code == 0, res.output
    assert "not used" in res.output and "expected RON RMSEP" not in res.output
