"""The selection run through the service layer: pool, space, picks, budget, storage, rights.

Numerical correctness of Kennard–Stone, D-optimal and Duplex themselves is checked
against the papers and reference implementations in tests/selection; here the
checks are that the registry hands those algorithms the right rows, in the right
space, and stores, prices and links what they return.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.spatial import cKDTree
from sqlmodel import func, select

from registry import catalog
from registry.errors import InputError, NotFoundError, PermissionDenied
from registry.lineage.verify import verify_registry as verify_chain
from registry.lineage.canonical import content_hash
from registry.selection import SelectionSpace, kennard_stone
from registry.services import admin, references
from registry.services import selection as svc
from registry.services import selection_runs as runs
from registry.services.models import DEFAULT_RECIPE
from registry.spectra.preprocessing import Recipe
from registry.storage.engine import session_scope
from registry.storage.models import (AuditEvent, ReferenceResult, Sample, SelectionPick,
                                     SelectionRun, Spectrum)
from tests.selection_service.conftest import N_NEW, N_REFERENCED, N_UNREFERENCED, ids_of, write_results


def run(engine, actor, *, store=True, **kw):
    kw.setdefault("property_codes", ["RON"])
    kw.setdefault("grade", "PREM95")
    kw.setdefault("method", "kennard-stone")
    with session_scope(engine) as s:
        return svc.run_selection(s, actor, store=store, **kw)


def catalog_cost(prop: str) -> float:
    return next(float(m["cost"]) for m in catalog.METHODS if m["property"] == prop)


def external_ids(engine, pks):
    with session_scope(engine) as s:
        rows = dict(s.exec(select(Sample.id, Sample.external_id).where(Sample.id.in_(pks))).all())
    return [rows[p] for p in pks]


def test_pool_and_reference_are_the_untested_and_the_referenced_samples(sel_registry):
    engine, actors, info, _ = sel_registry
    res = run(engine, actors["lab_manager"], n=3, store=False)
    # Without a model the reference set is every sample with a valid RON value.
    assert set(external_ids(engine, res.calibration_sample_ids)) == set(info["referenced"])
    assert set(external_ids(engine, res.pool_sample_ids)) == \
        set(info["unreferenced"]) | set(info["new_component"])
    assert res.pool_size == N_UNREFERENCED + N_NEW
    assert res.pool_sample_ids == sorted(res.pool_sample_ids)  # candidates ordered by sample id


def test_kennard_stone_picks_are_the_library_picks_on_independently_built_scores(sel_registry):
    """The service adds no hidden re-ordering: rebuild the space from the generator's arrays
    (float32 as stored), the default recipe and a PCA, then call kennard_stone directly."""
    engine, actors, info, _ = sel_registry
    res = run(engine, actors["lab_manager"], n=10, store=False)
    spectra = {sid: row for sid, row in zip(info["ids"], info["population"].spectra)}
    spectra.update(zip(info["new_component"], info["new_population"].spectra))
    cal = external_ids(engine, res.calibration_sample_ids)
    pool = external_ids(engine, res.pool_sample_ids)
    X = np.array([spectra[s] for s in cal + pool], dtype=np.float32).astype(np.float64)
    X_pre = Recipe.from_json(DEFAULT_RECIPE).build(info["population"].axis).fit_transform(X)
    space = SelectionSpace(explained_variance=0.99).fit(X_pre)
    T = space.transform(X_pre)
    picks = kennard_stone(T, 10, already_selected=np.arange(len(cal)), metric="mahalanobis",
                          eigenvalues=space.eigenvalues_)
    assert ids_of(res) == [pool[i - len(cal)] for i in picks]
    np.testing.assert_allclose(res.scores_pool, T[len(cal):], atol=1e-8)


def test_new_component_blends_are_picked_first(sel_registry):
    """Blends with a component absent from every calibration spectrum lie off the calibration
    space, so maximin coverage (Kennard & Stone 1969) and det(ZᵀZ) gain both reach them first."""
    engine, actors, info, _ = sel_registry
    new = set(info["new_component"])
    base_rate = N_NEW / (N_NEW + N_UNREFERENCED)
    for method in ("kennard-stone", "d-optimal"):
        res = run(engine, actors["lab_manager"], method=method, n=6, store=False)
        picked = ids_of(res)
        assert picked[0] in new, method
        share = sum(p in new for p in picked) / len(picked)
        assert share >= 4 / 6 > 10 * base_rate, (method, picked)
        if method == "kennard-stone":  # with a reference set every pick fills a gap in it
            assert all(r["reason"].startswith("largest remaining gap") for r in res.rows)


def test_budget_buys_whole_samples_at_the_sum_of_method_costs(sel_registry):
    engine, actors, _, _ = sel_registry
    per_sample = catalog_cost("RON") + catalog_cost("MON")  # D2699 + D2700 from the catalog
    res = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], budget=3000,
              store=False)
    assert res.cost_per_sample == per_sample == 500.0
    assert len(res.rows) == int(3000 // per_sample) == 6
    assert [r["cumulative_cost"] for r in res.rows] == [per_sample * k for k in range(1, 7)]
    assert res.total_cost == 3000.0
    assert "ASTM D2699" in res.tests and "ASTM D2700" in res.tests
    # A budget that is not a multiple: the remainder stays unspent.
    res = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], budget=3499,
              store=False)
    assert len(res.rows) == 6


def test_one_method_serving_several_properties_is_charged_once(sel_registry):
    engine, actors, _, _ = sel_registry
    # T10, T50 and T90 are read from one ASTM D86 distillation (catalog): one charge.
    res = run(engine, actors["lab_manager"], property_codes=["T10", "T50", "T90"], n=2,
              store=False)
    assert res.cost_per_sample == catalog_cost("T50")
    assert res.tests.count("ASTM D86") == 1


def test_n_picks_exactly_n_and_d_optimal_and_duplex_work(sel_registry):
    engine, actors, _, _ = sel_registry
    for method in ("kennard-stone", "d-optimal", "duplex"):
        res = run(engine, actors["lab_manager"], method=method, n=7, store=False)
        assert len(res.rows) == 7 and len(set(ids_of(res))) == 7, method
        assert [r["rank"] for r in res.rows] == list(range(1, 8))
    uses = [r["use"] for r in res.rows]
    # Duplex (Snee 1977): two calibration, two validation, then alternating.
    assert uses == ["calibration", "calibration", "validation", "validation", "calibration",
                    "validation", "calibration"]


def test_rerun_on_the_same_state_gives_the_same_picks(sel_registry):
    engine, actors, _, _ = sel_registry
    for method in ("kennard-stone", "d-optimal"):
        a = run(engine, actors["lab_manager"], method=method, n=8, store=False)
        b = run(engine, actors["lab_manager"], method=method, n=8, store=False)
        assert ids_of(a) == ids_of(b) and a.pool_sha256 == b.pool_sha256, method
    stored = run(engine, actors["lab_manager"], method="d-optimal", n=8)
    assert ids_of(stored) == ids_of(a) and stored.pool_sha256 == a.pool_sha256
    with session_scope(engine) as s:
        replay = runs.replay_selection(s, actors["lab_manager"], stored.run.id)
    assert replay["same_pool"] and replay["same_picks"]


def test_pool_hash_covers_candidate_ids_and_spectrum_hashes(sel_registry):
    engine, actors, _, _ = sel_registry
    res = run(engine, actors["lab_manager"], n=2, store=False)
    with session_scope(engine) as s:
        rows = s.exec(select(Spectrum.sample_id, Spectrum.sha256).order_by(Spectrum.id)).all()
    by_sample: dict[int, list[str]] = {}
    for sid, digest in rows:
        by_sample.setdefault(sid, []).append(digest)
    expected = content_hash([[sid, by_sample[sid]] for sid in res.pool_sample_ids])
    assert res.pool_sha256 == expected


def test_run_is_stored_with_picks_and_audited(sel_registry):
    engine, actors, _, _ = sel_registry
    res = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], budget=1500)
    with session_scope(engine) as s:
        run_row = s.get(SelectionRun, res.run.id)
        picks = s.exec(select(SelectionPick).where(SelectionPick.run_id == run_row.id)
                       .order_by(SelectionPick.rank)).all()
        event = s.exec(select(AuditEvent).where(AuditEvent.action == "selection_run")).one()
        assert verify_chain(s).intact
    assert run_row.state == "open" and run_row.method == "kennard-stone"
    assert run_row.property_codes == ["RON", "MON"] and run_row.budget == 1500
    assert run_row.pool_sha256 == res.pool_sha256 and run_row.pool_size == res.pool_size
    assert run_row.total_cost == 1500.0 and run_row.user_id == actors["lab_manager"].id
    p = run_row.parameters
    for key in ("grade", "method", "n", "budget", "pool", "since", "site", "recipe",
                "explained_variance", "metric", "space", "reference_sha256"):
        assert key in p
    assert [pk.sample_id for pk in picks] == res.picked_sample_ids
    assert [pk.cumulative_cost for pk in picks] == [500.0, 1000.0, 1500.0]
    assert all(pk.reason and "distance" in pk.reason for pk in picks)
    payload = json.loads(event.payload)
    assert [row[1] for row in payload["data"]["picks"]] == res.picked_sample_ids
    assert payload["data"]["pool_sha256"] == res.pool_sha256


def test_samples_waiting_in_an_open_run_leave_the_pool(sel_registry):
    engine, actors, _, _ = sel_registry
    first = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], n=5)
    second = run(engine, actors["lab_manager"], property_codes=["RON"], n=5, store=False)
    assert second.pool_size == first.pool_size - 5
    assert not set(first.picked_sample_ids) & set(second.pool_sample_ids)
    # They are only waiting for RON/MON: a density run may still choose them.
    density = run(engine, actors["lab_manager"], property_codes=["DENSITY"], n=5, store=False)
    assert set(first.picked_sample_ids) <= set(density.pool_sample_ids)


def test_results_link_back_and_answer_the_run(sel_registry, tmp_path):
    engine, actors, _, _ = sel_registry
    res = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], n=3)
    picked = ids_of(res)
    with session_scope(engine) as s:
        references.import_references(s, actors["analyst"], write_results(
            tmp_path / "ron.csv", picked, "RON", "ASTM D2699", [95.1, 96.2, 94.3]))
    with session_scope(engine) as s:
        assert s.get(SelectionRun, res.run.id).state == "open"  # MON still missing
        linked = s.exec(select(ReferenceResult).where(
            ReferenceResult.selection_pick_id.is_not(None))).all()
        assert len(linked) == 3
        references.import_references(s, actors["analyst"], write_results(
            tmp_path / "mon.csv", picked, "MON", "ASTM D2700", [85.0, 86.1, 84.2]))
    with session_scope(engine) as s:
        assert s.get(SelectionRun, res.run.id).state == "answered"
        detail = runs.run_detail(s, actors["auditor"], res.run.id)
    assert [p["sample_id"] for p in detail["picks"]] == picked
    assert all(len(p["results"]) == 2 for p in detail["picks"])
    # Tested samples are no longer candidates.
    after = run(engine, actors["lab_manager"], property_codes=["RON"], n=1, store=False)
    assert after.pool_size == res.pool_size - 3


@pytest.mark.parametrize("role", ["admin", "analyst", "reviewer", "auditor"])
def test_only_a_lab_manager_runs_a_selection_and_a_refusal_writes_nothing(sel_registry, role):
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        before = s.exec(select(func.count()).select_from(AuditEvent)).one()
    with pytest.raises(PermissionDenied):
        run(engine, actors[role], n=3)
    with session_scope(engine) as s:
        assert s.exec(select(func.count()).select_from(SelectionRun)).one() == 0
        assert s.exec(select(func.count()).select_from(AuditEvent)).one() == before


@pytest.mark.parametrize("kw, error, field", [
    ({"property_codes": ["XYZ"], "n": 3}, NotFoundError, None),
    ({"grade": "NOPE", "n": 3}, NotFoundError, None),
    ({"n": 3, "budget": 1000.0}, InputError, "--n/--budget"),
    ({}, InputError, "--n/--budget"),
    ({"n": 0}, InputError, "--n"),
    ({"n": 10_000}, InputError, "--n"),
    ({"budget": 100.0, "property_codes": ["RON", "MON"]}, InputError, "--budget"),
    ({"n": 3, "method": "random"}, InputError, "--method"),
    ({"n": 3, "method": "duplex"}, InputError, "--n"),
    ({"n": 3, "pool": "everything"}, InputError, "--pool"),
    ({"n": 3, "pool": "outside-coverage"}, InputError, "--pool"),  # no model yet
    ({"n": 3, "n_components": "model"}, InputError, "--components"),
    ({"n": 3, "property_codes": []}, InputError, "--property"),
])
def test_bad_requests_are_refused_with_the_field_named(sel_registry, kw, error, field):
    engine, actors, _, _ = sel_registry
    with pytest.raises(error) as exc:
        run(engine, actors["lab_manager"], **kw)
    if field:
        assert exc.value.field == field, str(exc.value)
    with session_scope(engine) as s:
        assert s.exec(select(func.count()).select_from(SelectionRun)).one() == 0


def test_empty_pool_is_a_clear_error(sel_registry):
    engine, actors, _, _ = sel_registry
    with session_scope(engine) as s:
        admin.add_grade(s, actors["admin"], "REG91", name="Regular", family="gasoline")
    with pytest.raises(InputError, match="no candidate samples") as exc:
        run(engine, actors["lab_manager"], grade="REG91", n=2)
    assert exc.value.field == "--pool"


def test_benefit_gap_figures_match_a_kd_tree_and_never_grow(sel_registry):
    engine, actors, _, _ = sel_registry
    res = run(engine, actors["lab_manager"], n=6, store=False)
    w = 1 / np.sqrt(res.eigenvalues)
    ref = res.scores_calibration * w
    # scipy's cKDTree as the outside reference for nearest-neighbour distances; all
    # untested spectra are recent here (acquired within 90 days of each other).
    recent = res.scores_pool * w
    gap_now = cKDTree(ref).query(recent)[0].max()
    picks = recent[[res.pool_sample_ids.index(p) for p in res.picked_sample_ids]]
    gap_after = cKDTree(np.vstack([ref, picks])).query(recent)[0].max()
    b = res.benefit
    assert b["n_recent"] == res.pool_size
    assert b["largest_gap_now"] == pytest.approx(gap_now, rel=1e-9)
    assert b["largest_gap_after"] == pytest.approx(gap_after, rel=1e-9)
    # Adding reference rows can only shorten a nearest distance (derived from the min).
    assert b["largest_gap_after"] <= b["largest_gap_now"]
    assert 0 <= b["inside_share_now"] <= 1 and 0 <= b["inside_share_after"] <= 1


def test_date_and_site_filters(sel_registry):
    engine, actors, info, _ = sel_registry
    from datetime import datetime, timezone

    # Spectra are dated 2027-01-01..27 by sample index (tests.factories); new ones from day 20.
    since = datetime(2027, 1, 25, tzinfo=timezone.utc)
    res = run(engine, actors["lab_manager"], n=1, since=since, store=False)
    with session_scope(engine) as s:
        times = s.exec(select(Spectrum.acquired_at).where(
            Spectrum.sample_id.in_(res.pool_sample_ids))).all()
    assert times and all(t >= since for t in times)
    assert res.pool_size < N_UNREFERENCED + N_NEW
    with pytest.raises(NotFoundError):
        run(engine, actors["lab_manager"], n=1, site="Nowhere", store=False)
    res = run(engine, actors["lab_manager"], n=1, site="Harbour Lab", store=False)
    assert res.pool_size == N_UNREFERENCED + N_NEW


def test_send_list_csv_has_the_promised_columns(sel_registry, tmp_path):
    engine, actors, _, _ = sel_registry
    res = run(engine, actors["lab_manager"], property_codes=["RON", "MON"], n=3, store=False)
    path = tmp_path / "send.csv"
    runs.write_send_list(path, res.rows)
    import csv

    with path.open() as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == list(svc.SEND_LIST_COLUMNS)
    assert [r["sample_id"] for r in rows] == ids_of(res)
    assert [float(r["cumulative_cost"]) for r in rows] == [500.0, 1000.0, 1500.0]
    assert all(r["reason"] for r in rows)
    assert N_REFERENCED == len(res.calibration_sample_ids)


def test_closing_a_run_returns_its_samples_to_the_pool(sel_registry):
    engine, actors, _, _ = sel_registry
    first = run(engine, actors["lab_manager"], property_codes=["RON"], n=4)
    with pytest.raises(PermissionDenied):
        with session_scope(engine) as s:
            runs.close_run(s, actors["analyst"], first.run.id, "budget cut")
    with pytest.raises(InputError, match="reason"):
        with session_scope(engine) as s:
            runs.close_run(s, actors["lab_manager"], first.run.id, " ")
    with session_scope(engine) as s:
        assert runs.close_run(s, actors["lab_manager"], first.run.id, "budget cut").state == "closed"
    again = run(engine, actors["lab_manager"], property_codes=["RON"], n=4, store=False)
    assert set(first.picked_sample_ids) <= set(again.pool_sample_ids)
    with pytest.raises(InputError, match="only an open run"):
        with session_scope(engine) as s:
            runs.close_run(s, actors["lab_manager"], first.run.id, "twice")
