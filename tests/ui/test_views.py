"""registry.services.views: the read-only functions behind the front end.

Checks against independent computations: the PCA map against a numpy SVD of
the same preprocessed calibration spectra, the coverage flags against the flags
the prediction service stored for the same spectra, the newest predictions
against what the prediction service returned.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import func
from sqlmodel import select

from registry.errors import InputError, NotFoundError, PermissionDenied
from registry.services import models, predictions, views
from registry.services.calibration import get_calset, members_of
from registry.storage.engine import make_engine, session_scope
from registry.storage.models import AuditEvent, Prediction
from registry.storage.spectra_store import load_matrix
from tests.conftest import ROLE_USERS


@pytest.fixture
def session_of(ui_reg):
    engine = make_engine(ui_reg.url)

    def open_session():
        return session_scope(engine)
    yield open_session
    engine.dispose()


def test_coverage_map_is_the_pca_of_the_preprocessed_calibration_spectra(ui_reg, session_of):
    with session_of() as s:
        cov = views.coverage_map(s, ui_reg.actors["reviewer"], "RON", "PREM95", days=90)
        mv = models.get_model(s, cov["model"])
        trained = models.load_trained(mv)
        cal = members_of(s, get_calset(s, "RON-A"), "cal")
        X, _ = load_matrix(s, [sid for m in cal for sid in m.spectrum_ids])
    assert cov["model"] == ui_reg.label and cov["counts"]["calibration"] == X.shape[0]
    # PCA by SVD of the column-centred matrix (Jolliffe, Principal Component Analysis, 2nd ed., §3.5):
    # scores = U·S, explained variance ratio = s²/Σs²; component signs are arbitrary.
    Xp = trained.preprocessor.transform(X)
    Xc = Xp - Xp.mean(axis=0)
    U, sv, _ = np.linalg.svd(Xc, full_matrices=False)
    scores = U[:, :2] * sv[:2]
    got = cov["calibration"]["scores"]
    for a in range(2):
        sign = np.sign(got[:, a] @ scores[:, a])
        np.testing.assert_allclose(sign * got[:, a], scores[:, a], atol=1e-8 * np.abs(scores).max())
    np.testing.assert_allclose(cov["explained_variance"], sv[:2] ** 2 / np.sum(sv ** 2), rtol=1e-8)


def test_coverage_flags_agree_with_the_flags_stored_by_the_prediction_service(ui_reg, session_of):
    with session_of() as s:
        cov = views.coverage_map(s, ui_reg.actors["analyst"], "RON", "PREM95")
        stored = {p.spectrum_id: p.flags for p in s.exec(select(Prediction)).all()}
    rec = cov["recent"]
    assert set(stored) <= set(rec["spectrum_ids"])  # every predicted spectrum is recent production
    space = set(views.SPACE_FLAGS)
    for sid, outside, flags in zip(rec["spectrum_ids"], rec["outside"], rec["flags"]):
        if sid in stored:
            assert bool(outside) == bool(space & set(stored[sid])), sid
            assert set(flags) <= set(stored[sid])  # stored flags add the model's standing
    weekly = cov["weekly"]
    assert sum(w["n"] for w in weekly) == cov["counts"]["recent"]
    assert sum(w["outside"] for w in weekly) == cov["counts"]["outside"] == int(np.sum(rec["outside"]))
    assert all(w["week_start"].weekday() == 0 for w in weekly)  # ISO 8601 weeks start on Monday
    assert all(cov["since"] <= t <= cov["until"] for t in rec["acquired_at"])


def test_a_shorter_window_keeps_only_the_newer_spectra(ui_reg, session_of):
    with session_of() as s:
        wide = views.coverage_map(s, ui_reg.actors["auditor"], "RON", "PREM95", days=90)
        narrow = views.coverage_map(s, ui_reg.actors["auditor"], "RON", "PREM95", days=7)
    assert narrow["until"] == wide["until"]
    expected = [t for t in wide["recent"]["acquired_at"] if t >= narrow["since"]]
    assert narrow["recent"]["acquired_at"] == expected and 0 < len(expected) < wide["counts"]["recent"]


def test_recent_predictions_are_the_newest_with_value_and_flags(ui_reg, session_of):
    with session_of() as s:
        batch = predictions.predict(s, ui_reg.actors["analyst"], ui_reg.label, spectrum_ids=[1, 2, 3])
    with session_of() as s:
        rows = views.recent_predictions(s, ui_reg.actors["auditor"], limit=3)
    assert sorted(r["id"] for r in rows) == sorted(p["id"] for p in batch.predictions)
    by_id = {p["id"]: p for p in batch.predictions}
    for r in rows:
        assert r["value"] == by_id[r["id"]]["value"] and r["flags"] == by_id[r["id"]]["flags"]
        assert r["model"] == ui_reg.label and r["instrument"] == "IR-100" and r["by"] == "anton"
    with session_of() as s, pytest.raises(InputError) as err:
        views.recent_predictions(s, ui_reg.actors["auditor"], limit=0)
    assert err.value.field == "limit"


@pytest.mark.parametrize("role", sorted(ROLE_USERS))
def test_every_role_may_view_and_viewing_writes_nothing(ui_reg, session_of, role):
    with session_of() as s:
        before = s.exec(select(func.count()).select_from(AuditEvent)).one()
    actor = ui_reg.actors[role]
    with session_of() as s:
        cat = views.catalog(s, actor)
        views.recent_predictions(s, actor)
        charts = views.qc_charts_available(s, actor)
        views.coverage_map(s, actor, "RON", "PREM95")
    with session_of() as s:
        assert s.exec(select(func.count()).select_from(AuditEvent)).one() == before
    assert "IR-100" in [i["serial"] for i in cat["instruments"]]
    assert "PREM95" in [g["code"] for g in cat["grades"]]
    assert charts == [{"instrument": "IR-100", "material": "CHECK-95", "property": "RON",
                       "model": ui_reg.label, "n": 20}]


def test_nobody_signed_in_is_refused(ui_reg, session_of):
    with session_of() as s:
        for call in (lambda: views.catalog(s, None), lambda: views.recent_predictions(s, None),
                     lambda: views.coverage_map(s, None, "RON", "PREM95")):
            with pytest.raises(PermissionDenied):
                call()


def test_coverage_map_refuses_bad_requests_naming_the_field(ui_reg, session_of):
    actor = ui_reg.actors["auditor"]
    with session_of() as s:
        with pytest.raises(InputError) as err:
            views.coverage_map(s, actor, "RON", "PREM95", days=0)
        assert err.value.field == "days"
        with pytest.raises(NotFoundError):  # no MON model exists
            views.coverage_map(s, actor, "MON", "PREM95")
        with pytest.raises(NotFoundError):
            views.coverage_map(s, actor, "RON", "NO-SUCH-GRADE")


def test_trace_documents_render_the_audit_trace_for_those_who_may_trace(ui_reg, session_of):
    pid = ui_reg.prediction_ids[0]
    with session_of() as s:
        out = views.trace_documents(s, ui_reg.actors["auditor"], pid)
        assert out["document"]["prediction"]["model"] == ui_reg.label
        assert out["html"].startswith("<!DOCTYPE html>") and f"prediction {pid}" in out["text"]
        with pytest.raises(PermissionDenied):  # tracing is for auditors, reviewers, lab managers
            views.trace_documents(s, ui_reg.actors["analyst"], pid)


def test_coverage_residuals_use_the_models_own_limits(ui_reg, session_of):
    """The T²/Q view repeats the model's diagnostics: a recent spectrum is beyond the Q limit
    there exactly when the prediction-time check flags it (same numbers, no second computation)."""
    with session_of() as s:
        cov = views.coverage_map(s, ui_reg.actors["auditor"], "RON", "PREM95")
    res, rec = cov["residuals"], cov["recent"]
    assert res["t2_limit"] > 0 and res["q_limit"] > 0
    over_q = np.asarray(res["recent"]["q"]) > res["q_limit"]
    flagged_q = np.array(["q_residual" in f for f in rec["flags"]])
    np.testing.assert_array_equal(over_q, flagged_q)
