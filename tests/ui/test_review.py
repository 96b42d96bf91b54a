"""registry.services.review: the reviewer's queue, evidence, comparison and approval rule.

Numbers are checked against independent computations: RMSECV at the chosen size as
√(PRESS/n) of the cross-validated predictions (Martens & Næs, Multivariate Calibration,
1989, §4.3), RMSEP, SEP and bias from numpy (ISO 12099; Næs et al., A User-Friendly
Guide to Multivariate Calibration and Classification, 2002), σ_R = R/2.77 (ISO 5725-6).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest

from registry.errors import PermissionDenied
from registry.services import admin, calibration, lifecycle, models, review
from registry.services.auth import authenticate
from registry.services.calibration import get_calset, members_of
from registry.storage.engine import dispose_engines, make_engine, session_scope
from registry.storage.models import Sample
from tests.conftest import PASSWORD
from tests.factories import copy_sqlite, trained_ron_version


@dataclass
class ReviewRegistry:
    url: str
    actors: dict
    v1: str   # active, trained by the analyst on RON-A
    v2: str   # in review, trained by dora (analyst + reviewer) on RON-B (five samples fewer)
    v3: str   # draft, trained by the analyst on RON-A again
    removed: list[str]


@pytest.fixture(scope="module")
def review_built(ui_built, tmp_path_factory):
    base = tmp_path_factory.mktemp("review") / "review.db"
    copy_sqlite(ui_built["path"], base)
    engine = make_engine(f"sqlite:///{base}")
    actors = dict(ui_built["actors"])
    with session_scope(engine) as s:
        admin.add_user(s, actors["admin"], "dora", ["analyst", "reviewer"], PASSWORD,
                       full_name="Dora Lind")
    with session_scope(engine) as s:
        actors["dora"] = authenticate(s, "dora", PASSWORD)
        members = members_of(s, get_calset(s, "RON-A"))
        ext = {m.sample_id: s.get(Sample, m.sample_id).external_id for m in members}
        cal = [ext[m.sample_id] for m in members if m.role == "cal"]
        val = [ext[m.sample_id] for m in members if m.role == "val"]
    removed = sorted(cal[:5])
    with session_scope(engine) as s:  # the same validation samples, five calibration samples fewer
        calibration.create_calibration_set(s, actors["lab_manager"], "RON-B", property_code="RON",
                                           grade_code="PREM95", sample_external_ids=cal[5:] + val,
                                           validation_external_ids=val)
    with session_scope(engine) as s:
        v2 = models.train_model_version(s, actors["dora"], "RON-B", max_components=5).label
    with session_scope(engine) as s:
        assert models.validate_model(s, actors["reviewer"], v2).passed
    with session_scope(engine) as s:
        lifecycle.submit_model(s, actors["dora"], v2, "ready")
    v3 = trained_ron_version(engine, actors, new_set=False)
    engine.dispose()
    return {"path": base, "actors": actors, "v1": ui_built["label"], "v2": v2, "v3": v3,
            "removed": removed}


@pytest.fixture
def rev(review_built, tmp_path, monkeypatch):
    path = tmp_path / "registry.db"
    copy_sqlite(review_built["path"], path)
    url = f"sqlite:///{path}"
    monkeypatch.setenv("SPECLEDGER_DATABASE_URL", url)
    yield ReviewRegistry(url=url, actors=review_built["actors"], v1=review_built["v1"],
                         v2=review_built["v2"], v3=review_built["v3"],
                         removed=review_built["removed"])
    dispose_engines()


def call(reg, fn, *args, role="reviewer", **kw):
    return service(reg, fn, *args, role=role, **kw)


def test_queue_lists_drafts_and_versions_in_review_oldest_first(rev):
    queue = call(rev, review.review_queue)
    assert [(q["label"], q["waiting_for"]) for q in queue] == [(rev.v2, "approval"),
                                                             (rev.v3, "validation")]
    assert queue[0]["since"] <= queue[1]["since"]
    assert queue[0]["author"] == "Dora Lind"


def test_cross_validated_predictions_give_the_stored_rmsecv(rev):
    ev = call(rev, review.model_evidence, rev.v1, role="auditor")
    cv = ev["cross_validation"]
    e = cv["predicted"] - cv["reference"]
    # RMSECV(A) = √(PRESS(A)/n), PRESS = Σ(y − ŷ_cv)² (Martens & Næs 1989)
    assert np.sqrt(np.mean(e ** 2)) == pytest.approx(ev["cv_curve"]["rmsecv"][ev["components"] - 1],
                                                     rel=1e-9)
    engine = make_engine(rev.url)
    with session_scope(engine) as s:
        cal = members_of(s, get_calset(s, "RON-A"), "cal")
        expected = [m.reference_value for m in cal for _ in m.spectrum_ids]
    engine.dispose()
    np.testing.assert_array_equal(cv["reference"], expected)
    assert len(cv["acquired_at"]) == len(expected)


def test_validation_set_predictions_reproduce_the_stored_statistics(rev):
    ev = call(rev, review.model_evidence, rev.v1, role="auditor")
    val, rec = ev["validation_set"], ev["latest_validation"]
    e = val["predicted"] - val["reference"]   # e = ŷ − y (ISO 12099)
    assert rec["bias"] == pytest.approx(e.mean(), rel=1e-9, abs=1e-12)
    assert rec["rmsep"] == pytest.approx(np.sqrt(np.mean(e ** 2)), rel=1e-9)
    assert rec["sep"] == pytest.approx(np.std(e, ddof=1), rel=1e-9)
    assert rec["passed"] is True and "σ_R" in rec["rule"]
    p = ev["precision"]
    # σ_R = R / (1.96·√2) (ISO 5725-6)
    assert p["sigma_R"] == pytest.approx(p["R"] / (1.96 * np.sqrt(2)))
    assert p["r"] < p["R"] and p["method"] == "ASTM D2699"
    assert p["level"] == pytest.approx(val["reference"].mean())


def test_reused_calibration_set_and_shared_artifact_are_warned(rev):
    ev3 = call(rev, review.model_evidence, rev.v3)
    assert any("RON-A" in w and rev.v1 in w for w in ev3["warnings"])
    d1, d3 = (call(rev, models.model_detail, v) for v in (rev.v1, rev.v3))
    same_hash = d1["artifact_sha256"] == d3["artifact_sha256"]
    assert same_hash == any("SHA-256" in w for w in ev3["warnings"])
    ev2 = call(rev, review.model_evidence, rev.v2)
    assert ev2["warnings"] == []


def test_the_author_is_refused_by_name_and_another_reviewer_may_approve(rev):
    mine = call(rev, review.approval_status, rev.v2, role="dora")
    assert not mine["allowed"] and "Dora Lind is the author" in mine["reason"]
    assert not any(ch.isdigit() for ch in mine["reason"].replace(rev.v2, ""))  # no user ids
    with pytest.raises(PermissionDenied, match="Dora Lind is the author"):
        call(rev, lifecycle.approve_model, rev.v2, role="dora", password=PASSWORD)
    assert call(rev, review.approval_status, rev.v2) == {"allowed": True, "reason": None}
    analyst = call(rev, review.approval_status, rev.v2, role="analyst")
    assert not analyst["allowed"] and "roles" in analyst["reason"]


def test_compare_lists_the_samples_removed_and_the_ranges(rev):
    cmp = call(rev, review.compare_versions, rev.v1, rev.v2)
    assert cmp["removed"] == rev.removed and cmp["added"] == [] and not cmp["same_set"]
    a, b = cmp["a"], cmp["b"]
    assert a["calibration_set"]["name"] == "RON-A" and b["calibration_set"]["name"] == "RON-B"
    assert a["rmsecv_at_chosen"] == a["rmsecv"][a["components"] - 1]
    lo, hi = b["calibration_set"]["range"]
    assert a["calibration_set"]["range"][0] <= lo <= hi <= a["calibration_set"]["range"][1]
    assert b["validation"]["passed"] is True


# --------------------------------------------------------------------------- the page
from tests.ui.helpers import array, frame, open_page, plotly_specs, service, signed_in, texts  # noqa: E402


def _signed_in_as(name: str):
    from streamlit.testing.v1 import AppTest

    from tests.ui.helpers import APP
    at = AppTest.from_file(APP, default_timeout=30).run()
    at.text_input(key="sign_in_name").input(name)
    at.text_input(key="sign_in_password").input(PASSWORD)
    at.form_submit_button[0].click().run()
    return at


def _version(at, label):
    at.selectbox(key="models_label").set_value(label)
    return at.run()


def test_page_shows_the_queue_as_links_and_the_evidence_of_a_version(rev):
    at = open_page(signed_in("reviewer"), "models")
    assert not at.exception and not at.error, [e.value for e in at.error]
    links = [(e.proto.label, e.proto.query_string) for e in at.get("page_link")]
    assert [q for _, q in links] == [f"version={rev.v2}", f"version={rev.v3}"]  # oldest first
    assert links[0][0].startswith(f"{rev.v2}: waiting for approval")
    assert links[1][0].startswith(f"{rev.v3}: waiting for validation")
    at = _version(at, rev.v1)
    ev = call(rev, review.model_evidence, rev.v1)
    specs = plotly_specs(at)
    pred = {t["name"]: t for t in specs[0]["data"]}
    assert set(pred) == {"cross-validation", "validation set", "identity (ŷ = y)"}
    np.testing.assert_allclose(array(pred["validation set"]["y"]), ev["validation_set"]["predicted"])
    np.testing.assert_allclose(array(pred["cross-validation"]["x"]), ev["cross_validation"]["reference"])
    ident = pred["identity (ŷ = y)"]
    assert list(array(ident["x"])) == list(array(ident["y"]))  # the line ŷ = y
    # residuals e = ŷ − y (ISO 12099), computed here with numpy
    resid = {t["name"]: t for t in specs[1]["data"]}
    e = ev["validation_set"]["predicted"] - ev["validation_set"]["reference"]
    np.testing.assert_allclose(array(resid["validation set"]["y"]), e)
    for spec in specs:  # every axis has a title with units or a count
        layout = spec["layout"]
        assert layout["xaxis"]["title"]["text"] and layout["yaxis"]["title"]["text"]
    stats = frame(at, "")
    by = dict(zip(stats[""], stats.iloc[:, 1]))
    assert float(by["σ_R = R/2.77"]) == pytest.approx(ev["precision"]["sigma_R"], rel=5e-4)
    assert by["verdict"] == "passed" and "σ_R" in by["acceptance rule"]


def test_author_sees_the_reason_instead_of_the_approve_form(rev):
    at = _version(open_page(_signed_in_as("dora"), "models"), rev.v2)
    assert not at.exception
    keys = [f.proto.form_id for f in at.form_submit_button]
    assert "act_approve" not in keys and "act_reject" in keys
    assert any("Dora Lind is the author" in i.value for i in at.info)
    at = _version(open_page(signed_in("reviewer"), "models"), rev.v2)
    assert "act_approve" in [f.proto.form_id for f in at.form_submit_button]


def test_page_compares_two_versions_and_warns_of_a_reused_set(rev):
    at = _version(open_page(signed_in("reviewer"), "models"), rev.v2)
    at.selectbox(key="models_compare").set_value(rev.v1).run()
    table = frame(at, rev.v2)
    assert table[rev.v1].tolist()[table[""].tolist().index("calibration set")] == "RON-A"
    assert f"(removed, 5): {', '.join(rev.removed)}" in texts(at)
    at = _version(at, rev.v3)
    assert any("RON-A" in w.value and rev.v1 in w.value for w in at.warning)


def test_a_link_naming_a_version_selects_it_once_then_the_choice_is_the_users(rev):
    """The queue's links carry ``?version=``: the page opens on that version, and a later
    choice in the selector is not overridden by the link's parameter."""
    at = signed_in("reviewer")
    at.query_params["version"] = rev.v1
    at = open_page(at, "models")
    assert at.selectbox(key="models_label").value == rev.v1
    assert any(s.value.startswith(f"{rev.v1}:") for s in at.subheader)
    at = _version(at, rev.v2)
    assert at.selectbox(key="models_label").value == rev.v2
    assert any(s.value.startswith(f"{rev.v2}:") for s in at.subheader)
