"""Selection guided by the current model: its recipe, its calibration set, its space checks."""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from registry.lifecycle.states import CURRENT_MODEL_STATES
from registry.services import calibration, models
from registry.services import selection as svc
from registry.storage.engine import session_scope
from registry.storage.models import CalibrationMember, ModelVersion, Sample
from tests.selection_service.conftest import ids_of

SPACE_FLAGS = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour")


@pytest.fixture
def with_model(sel_registry):
    engine, actors, info, url = sel_registry
    with session_scope(engine) as s:
        calibration.create_calibration_set(s, actors["lab_manager"], "RON-SEL", property_code="RON",
                                           grade_code="PREM95", all_referenced=True,
                                           validation="duplex:0.25")
    with session_scope(engine) as s:
        mv = models.train_model_version(s, actors["analyst"], "RON-SEL", max_components=8, folds=5)
    return engine, actors, info, mv


def _set_state(engine, mv, state):
    # Activation is another action's job; the state alone is what selection reads.
    with session_scope(engine) as s:
        row = s.get(ModelVersion, mv.id)
        row.state = state
        s.add(row)


def _run(engine, actor, **kw):
    kw.setdefault("property_codes", ["RON"])
    with session_scope(engine) as s:
        return svc.run_selection(s, actor, grade="PREM95", method="kennard-stone", store=False, **kw)


def test_current_model_rule(with_model):
    engine, actors, _, mv = with_model
    # A draft is not a current model: plain PCA on the default recipe.
    assert _run(engine, actors["lab_manager"], n=2).model_label is None
    _set_state(engine, mv, "validated")
    assert _run(engine, actors["lab_manager"], n=2).model_label == mv.label
    _set_state(engine, mv, "active")
    res = _run(engine, actors["lab_manager"], n=2, n_components="model")
    assert res.model_label == mv.label
    assert res.parameters["space"]["components"] == mv.n_components
    assert res.parameters["space"]["recipe"] == mv.recipe


def test_reference_set_is_the_models_calibration_members(with_model):
    engine, actors, _, mv = with_model
    _set_state(engine, mv, "active")
    res = _run(engine, actors["lab_manager"], n=2)
    with session_scope(engine) as s:
        cal = s.exec(select(CalibrationMember.sample_id).where(
            CalibrationMember.set_id == mv.calibration_set_id,
            CalibrationMember.role == "cal")).all()
    assert sorted(res.calibration_sample_ids) == sorted(cal)


def test_outside_coverage_pool_is_what_the_model_flags(with_model):
    """Recompute the model's checks on the generator's arrays (float32 as stored) with the
    loaded artifact; the pool must be exactly the samples with a space flag."""
    engine, actors, info, mv = with_model
    _set_state(engine, mv, "active")
    full = _run(engine, actors["lab_manager"], n=1)
    res = _run(engine, actors["lab_manager"], n=4, pool="outside-coverage")
    with session_scope(engine) as s:
        names = dict(s.exec(select(Sample.id, Sample.external_id)).all())
        trained = models.load_trained(s.get(ModelVersion, mv.id))
    spectra = dict(zip(info["ids"], info["population"].spectra))
    spectra.update(zip(info["new_component"], info["new_population"].spectra))
    candidates = [names[p] for p in full.pool_sample_ids]
    X = np.array([spectra[c] for c in candidates], dtype=np.float32).astype(np.float64)
    _, diag = trained.predict(X)
    expected = {c for c, flags in zip(candidates, diag.flag_lists())
                if set(flags) & set(SPACE_FLAGS)}
    assert {names[p] for p in res.pool_sample_ids} == expected
    # A band absent from every calibration spectrum leaves a spectral residual the model
    # cannot explain (Q-residual check, ASTM E1655, from memory).
    assert set(info["new_component"]) <= expected
    for row in res.rows:
        assert row["flags"] and "outside the RON model's space" in row["reason"]
        if row["sample_id"] in info["new_component"]:
            assert "Q residual" in row["reason"] and "> limit" in row["reason"]
    assert ids_of(res)[0] in info["new_component"]


def test_current_model_is_one_rule_for_selection_and_the_coverage_view(with_model):
    """Active first, else the newest approved or validated version, else none; the coverage
    map and the selection run name the same version."""
    from registry.services import admin, views

    engine, actors, _, mv = with_model
    with session_scope(engine) as s:
        prop, grade = admin.get_property(s, "RON"), admin.get_grade(s, "PREM95")
        assert models.current_model(s, prop, grade) is None  # a draft is not current
    for state in ("validated", "approved", "active"):
        _set_state(engine, mv, state)
        with session_scope(engine) as s:
            assert models.current_model(s, prop, grade).label == mv.label
            cov = views.coverage_map(s, actors["auditor"], "RON", "PREM95")
        assert cov["model"] == mv.label == _run(engine, actors["lab_manager"], n=2).model_label
    _set_state(engine, mv, "retired")
    with session_scope(engine) as s:
        assert models.current_model(s, prop, grade) is None
    assert set(CURRENT_MODEL_STATES) == {"active", "approved", "validated"}
