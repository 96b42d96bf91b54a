"""Train page: for the roles that may train, it trains a draft version through the same
service as the command line, which then lists it, and shows its RMSECV curve with the
chosen size marked.

Reference for the curve: the version the service stored (its ``cv`` summary, itself
checked against scikit-learn's PLS in tests/chemometrics); the permission table in
registry/lifecycle/permissions.py says who may train.
"""

from __future__ import annotations

import numpy as np
import pytest

from registry.lifecycle.permissions import Action, is_allowed
from registry.services import models
from ui.navigation import pages_for
from tests.ui.helpers import array, open_page, plotly_specs, service, signed_in, texts


@pytest.mark.parametrize("role", ["admin", "lab_manager", "reviewer", "auditor", "analyst"])
def test_train_is_in_the_navigation_only_for_roles_that_may_train(role):
    # the permission table is the reference: training is the analyst's action
    titles = [title for _, title, _ in pages_for({role})]
    assert ("Train" in titles) == is_allowed({role}, Action.MODEL_TRAIN) == (role == "analyst")
    assert "Overview" in titles and "Models" in titles


def test_the_train_page_is_not_registered_for_a_role_that_may_not_train(ui_reg):
    at = signed_in("reviewer")
    with pytest.raises(ValueError, match="navigation page"):
        open_page(at, "train")


def test_the_analyst_trains_a_version_the_service_then_lists(ui_reg):
    before = {r["label"] for r in service(ui_reg, models.list_models)}
    at = open_page(signed_in("analyst"), "train")
    assert not at.exception and not at.error
    at.selectbox(key="train_set").select_index(0)
    at.number_input(key="train_max").set_value(6)
    at.number_input(key="train_folds").set_value(5)
    at.form_submit_button[0].click().run()
    assert not at.exception and not at.error, [e.value for e in at.error]
    rows = service(ui_reg, models.list_models)
    [new] = [r for r in rows if r["label"] not in before]
    assert new["state"] == "draft" and new["property"] == "RON"
    detail = service(ui_reg, models.model_detail, new["label"])
    cv = detail["cv"]
    assert len(cv["rmsecv"]) == 6 and cv["n_folds"] == 5
    [curve] = [s for s in plotly_specs(at) if any(t["name"] == "RMSECV" for t in s["data"])]
    traces = {t["name"]: t for t in curve["data"]}
    np.testing.assert_allclose(array(traces["RMSECV"]["y"]), cv["rmsecv"])
    chosen = detail["components"]
    marked = traces[f"chosen: {chosen} components"]
    assert list(array(marked["x"])) == [chosen]
    assert array(marked["y"])[0] == pytest.approx(cv["rmsecv"][chosen - 1])
    assert curve["layout"]["xaxis"]["title"]["text"] == "number of PLS components"
    assert curve["layout"]["yaxis"]["title"]["text"].startswith("RMSECV (")
    # the way on to validation, and the caution beside the result
    assert "specification test method" in texts(at)
    link = at.get("page_link")[0].proto
    assert new["label"] in link.label and link.query_string == "version=" + new["label"]


def test_a_recipe_the_service_refuses_is_shown_as_a_message(ui_reg):
    at = open_page(signed_in("analyst"), "train")
    at.number_input(key="train_window").set_value(3)
    at.number_input(key="train_polyorder").set_value(4)  # order above the window: refused
    at.form_submit_button[0].click().run()
    assert not at.exception
    assert any("polyorder" in e.value or "window" in e.value for e in at.error), \
        [e.value for e in at.error]
    assert "--" not in " ".join(e.value for e in at.error)  # no command-line wording
