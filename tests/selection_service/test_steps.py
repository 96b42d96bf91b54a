"""Each named step of a selection run on its own: request → setting → pool → space → picks →
reasons → stored run (registry.services.selection)."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
from scipy.spatial.distance import cdist
from sklearn.decomposition import PCA
from sqlmodel import func, select

from registry import catalog
from registry.errors import InputError
from registry.services import selection as svc
from registry.services.models import DEFAULT_RECIPE
from registry.spectra.preprocessing import Recipe
from registry.storage.engine import session_scope
from registry.storage.models import AuditEvent, SelectionPick, SelectionRun
from tests.selection_service.conftest import N_NEW, N_REFERENCED, N_UNREFERENCED


def _steps(s, **kw):
    kw.setdefault("property_codes", ["RON"])
    kw.setdefault("grade", "PREM95")
    kw.setdefault("method", "kennard-stone")
    kw.setdefault("n", 5)
    setting = svc.resolve_request(s, svc.check_request(**kw))
    pool = svc.build_pool(s, setting)
    return setting, pool, svc.build_space(setting, pool)


def test_check_request_needs_no_database_and_normalises():
    east = timezone(timedelta(hours=2))
    req = svc.check_request(property_codes=[" ron", "mon "], grade="PREM95", method="duplex",
                            budget=2000.0, since=datetime(2027, 1, 2, 9, tzinfo=east),
                            recipe=[{"step": "savgol", "window_length": 7, "polyorder": 2}])
    assert req.property_codes == ("RON", "MON") and req.n is None and req.budget == 2000.0
    assert req.since == datetime(2027, 1, 2, 7, tzinfo=timezone.utc)
    assert req.recipe == [{"step": "savgol", "window_length": 7, "polyorder": 2, "deriv": 0,
                           "mode": "interp"}]
    for kw, field in (({"n": 3, "method": "duplex"}, "--n"), ({"n": 2, "metric": "cosine"}, "--metric"),
                      ({"n": 2, "property_codes": ["RON", "ron"]}, "--property"),
                      ({"n": 2, "recipe": [{"step": "smooth"}]}, "steps[0].step")):
        args = {"property_codes": ["RON"], "grade": "PREM95", "method": "kennard-stone", **kw}
        with pytest.raises(InputError) as info:
            svc.check_request(**args)
        assert info.value.field == field


def test_resolve_request_prices_the_tests_from_the_catalog(sel_registry):
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        setting = svc.resolve_request(s, svc.check_request(
            property_codes=["RON", "MON"], grade="PREM95", method="kennard-stone", n=2))
        cost = {m["property"]: float(m["cost"]) for m in catalog.METHODS}
        assert setting.cost_per_sample == cost["RON"] + cost["MON"]
        assert setting.space_model is None and setting.trained == {}
        assert svc.pick_count(setting, 40) == 2
        budget = svc.resolve_request(s, svc.check_request(
            property_codes=["RON", "MON"], grade="PREM95", method="kennard-stone", budget=1999.0))
        assert svc.pick_count(budget, 40) == int(1999.0 // setting.cost_per_sample)
        with pytest.raises(InputError) as info:
            svc.pick_count(setting, 1)
        assert info.value.field == "--n"


def test_build_pool_rows_are_the_stored_spectra_of_each_sample(sel_registry):
    """Rows are the generator's arrays as stored (float32), one per sample (one replicate)."""
    engine, actors, info, _ = sel_registry
    with session_scope(engine) as s:
        setting, pool, _ = _steps(s)
        labels = {sid: smp.external_id for sid, smp in pool.samples.items()}
    spectra = dict(zip(info["ids"], info["population"].spectra))
    spectra.update(zip(info["new_component"], info["new_population"].spectra))
    assert pool.size == N_UNREFERENCED + N_NEW and len(pool.reference_ids) == N_REFERENCED
    assert {labels[p] for p in pool.ids} == set(info["unreferenced"]) | set(info["new_component"])
    expected = np.array([spectra[labels[p]] for p in pool.ids], dtype=np.float32).astype(np.float64)
    np.testing.assert_array_equal(pool.X_universe[pool.rows], expected)
    ref = np.array([spectra[labels[p]] for p in pool.reference_ids], dtype=np.float32)
    np.testing.assert_array_equal(pool.X_reference, ref.astype(np.float64))
    np.testing.assert_array_equal(pool.axis, info["population"].axis)


def test_build_space_scores_equal_scikit_learn_pca(sel_registry):
    # Source: sklearn.decomposition.PCA as the reference PCA (scores equal up to the sign
    # of each component), on the default recipe applied to reference + candidate rows.
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        setting, pool, space = _steps(s)
    X = np.vstack([pool.X_reference, pool.X_universe])
    X_pre = Recipe.from_json(DEFAULT_RECIPE).build(pool.axis).fit_transform(X)
    a = space.space.n_components_
    ref = PCA(n_components=a, svd_solver="full").fit_transform(X_pre)
    T = np.vstack([space.T_reference, space.T_universe])
    signs = np.sign((ref * T).sum(axis=0))
    np.testing.assert_allclose(T, ref * signs, atol=1e-8 * np.abs(ref).max())
    np.testing.assert_array_equal(space.T_pool, space.T_universe[pool.rows])
    assert space.recipe == DEFAULT_RECIPE and space.eigenvalues is not None
    assert np.sum(PCA().fit(X_pre).explained_variance_ratio_[:a]) >= 0.99 - 1e-12


def test_explained_picks_report_scipy_nearest_distances_and_running_cost(sel_registry):
    # Source: scipy.spatial.distance.cdist on Mahalanobis-scaled scores for the distance
    # to the nearest calibration sample or earlier pick printed with each pick.
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        setting, pool, space = _steps(s, property_codes=["RON", "MON"], n=4)
        picks = svc.choose_picks(setting, pool, space)
        rows = svc.explain_picks(setting, pool, space, picks)
    w = 1 / np.sqrt(space.eigenvalues)
    for r, row in enumerate(rows):
        before = np.vstack([space.T_reference, space.T_pool[picks.rows[:r]]]) * w
        d = cdist(space.T_pool[[picks.rows[r]]] * w, before)[0]
        assert row["distance"] == pytest.approx(d.min(), rel=1e-12)
        assert f"{d.min():.3g}" in row["reason"] and row["nearest_sample"] in row["reason"]
        assert row["cumulative_cost"] == pytest.approx(500.0 * (r + 1))
        assert row["sample_pk"] == pool.ids[picks.rows[r]]


def test_coverage_benefit_counts_recent_production(sel_registry):
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        setting, pool, space = _steps(s)
        picks = svc.choose_picks(setting, pool, space)
        benefit = svc.coverage_benefit(s, setting, pool, space, picks)
    newest = max(r.acquired_at for refs in pool.spectra.values() for r in refs)
    recent = [s for s, refs in pool.spectra.items()
              if max(r.acquired_at for r in refs) >= newest - timedelta(days=90)]
    assert benefit["n_recent"] == len(recent) and benefit["recent_window_days"] == 90
    assert benefit["largest_gap_after"] <= benefit["largest_gap_now"]


def test_store_run_writes_the_run_its_picks_and_one_audit_event(sel_registry):
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        setting, pool, space = _steps(s, n=3)
        result = svc.selection_result(s, setting, pool, space, svc.choose_picks(setting, pool, space))
        assert s.exec(select(func.count()).select_from(SelectionRun)).one() == 0
        before = s.exec(select(func.count()).select_from(AuditEvent)).one()
        run = svc.store_run(s, actors["lab_manager"], result, setting)
        picks = s.exec(select(SelectionPick).where(SelectionPick.run_id == run.id)
                       .order_by(SelectionPick.rank)).all()
        assert [p.sample_id for p in picks] == result.picked_sample_ids
        assert s.exec(select(func.count()).select_from(AuditEvent)).one() == before + 1
        assert run.parameters["method"] == "kennard-stone" and run.pool_sha256 == pool.sha256
