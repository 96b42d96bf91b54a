"""Benchmark: trace of one prediction, and ``audit verify``, on a large registry.

Plain script (``make bench``). Builds, on SQLite (temp file) and on PostgreSQL
(a fresh database on the test server, skipped if none answers), a registry of
100,000 predictions, 20,000 spectra (1,738 points: 4000–650 cm⁻¹ at ~1.93 cm⁻¹
spacing, common practice for 4 cm⁻¹ resolution with zero filling), 10,000
samples, 6,000 RON results (200 of them corrected), 10 selection runs, 50
calibration sets of 150 samples, 50 model versions with validation records,
signed approvals and deployments, QC results, and an audit chain of 100,000
events that vouches for every content hash. Rows are bulk-inserted through
the storage layer (SQLAlchemy core inserts) for speed; hashes are computed
with the registry's own content-hash functions, so ``audit verify`` must
report the registry intact. ``ANALYZE`` runs after the load (a bulk load leaves
the planner without statistics; autovacuum would have gathered them).

Figures:
  (a) trace of a random prediction (50 of them, fresh session each, through
      the auditor's service call): median and p95, ratio to the 100 ms goal,
      and ratio to a same-run reference, one primary-key lookup of a
      prediction in a fresh session (the floor of any trace).
  (b) ``audit verify`` over the 100,000 events and all hashed content
      (goal: "seconds"; printed against 10 s).
"""

from __future__ import annotations

import hashlib
import os
import random
import statistics
import sys
import tempfile
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path
from types import SimpleNamespace

import numpy as np
from sqlalchemy import insert, select
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.chemometrics.validation import (AcceptanceCriteria,  # noqa: E402
                                              ValidationStatistics)
from registry.lifecycle.signatures import signed_content_hash  # noqa: E402
from registry.lineage.audit_chain import GENESIS, link_hash  # noqa: E402
from registry.lineage.canonical import canonical_json  # noqa: E402
from registry.lineage.content_hashes import (artifact_hash, calibration_set_hash,  # noqa: E402
                                             reference_result_hash, signature_hash,
                                             validation_record_hash)
from registry.lineage.verify import verify_registry  # noqa: E402
from registry.services import admin  # noqa: E402
from registry.services import audit as audit_svc  # noqa: E402
from registry.spectra.axes import axis_sha256  # noqa: E402
from registry.storage.engine import make_engine, session_scope, upgrade  # noqa: E402
from registry.storage.models import (AuditEvent, CalibrationMember, CalibrationSet,  # noqa: E402
                                     Deployment, Grade, Instrument, ModelStateChange, ModelVersion,
                                     Prediction, Property, QCResult, ReferenceMethod,
                                     ReferenceResult, RevalidationTrigger, Sample, SelectionPick,
                                     SelectionRun, Signature, Site, SpectralAxis, Spectrum,
                                     ValidationRecord)

N_SAMPLES = 10_000
N_SPECTRA = 20_000
N_POINTS = 1_738
N_REFERENCED = 6_000
N_CORRECTED = 200
N_RUNS, PICKS_PER_RUN = 10, 100
N_MODELS = 50
SET_SIZE = 150
N_PREDICTIONS = 100_000
N_EVENTS = 100_000
N_TRACES = 50
GOAL_MS = 100.0
VERIFY_GOAL_S = 10.0
T0 = datetime(2027, 1, 1, tzinfo=timezone.utc)


class Chain:
    """Builds audit events exactly as ``append_event`` does, for bulk insertion."""

    def __init__(self, session):
        last = session.execute(select(AuditEvent.id, AuditEvent.hash)
                               .order_by(AuditEvent.id.desc()).limit(1)).first()
        self.seq, self.prev = (last[0], last[1]) if last else (0, GENESIS)
        self.rows: list[dict] = []

    def add(self, at, user_id, user, action, entity_type="", entity_id=None, data=None):
        self.seq += 1
        payload = canonical_json({"seq": self.seq, "at": at, "user": user, "action": action,
                                  "entity_type": entity_type, "entity_id": entity_id,
                                  "data": data or {}})
        digest = link_hash(self.prev, payload)
        self.rows.append({"id": self.seq, "occurred_at": at, "user_id": user_id,
                          "user_name": user, "action": action, "entity_type": entity_type,
                          "entity_id": entity_id, "payload": payload, "prev_hash": self.prev,
                          "hash": digest})
        self.prev = digest


def bulk(session, table, rows, chunk=5000):
    for i in range(0, len(rows), chunk):
        session.execute(insert(table), rows[i:i + chunk])


def build(url: str) -> dict:
    """Populate the registry at ``url``; returns ids for the timings."""
    from tests.conftest import populate_basics

    engine = make_engine(url)
    actors = populate_basics(engine)
    rng = np.random.default_rng(7)
    with session_scope(engine) as s:
        admin.add_instrument(s, actors["admin"], "IR-200", site="Harbour Lab")
        admin.add_instrument(s, actors["admin"], "IR-300", site="Harbour Lab")
    with session_scope(engine) as s:
        site_id = s.execute(select(Site.id)).scalar()
        instruments = list(s.execute(select(Instrument.id).order_by(Instrument.id)).scalars())
        ron = s.execute(select(Property.id).where(Property.code == "RON")).scalar()
        method = s.execute(select(ReferenceMethod.id).where(
            ReferenceMethod.property_id == ron, ReferenceMethod.code == "ASTM D2699")).scalar()
        grade = s.execute(select(Grade.id)).scalar()
        chain = Chain(s)
        ana, mgr, rev = actors["analyst"], actors["lab_manager"], actors["reviewer"]

        # axis, samples, spectra ---------------------------------------------------------
        x = np.linspace(650.0, 4000.0, N_POINTS)
        xb = x.astype("<f8").tobytes()
        s.execute(insert(SpectralAxis), [{"id": 1, "unit": "1/CM", "n_points": N_POINTS,
                                          "first_x": 650.0, "last_x": 4000.0, "values": xb,
                                          "sha256": axis_sha256(x)}])
        bulk(s, Sample, [{"id": i, "site_id": site_id, "external_id": f"B{i:05d}",
                          "grade_id": grade, "batch": "", "source": "",
                          "created_at": T0} for i in range(1, N_SAMPLES + 1)])
        prefix = hashlib.sha256(xb)
        base = np.exp(-((x[None, :] - rng.uniform(700, 3900, (8, 1))) / 40.0) ** 2).sum(0)
        spectra, vouched = [], []
        for i in range(1, N_SPECTRA + 1):
            y = (base * rng.uniform(0.5, 1.5) + rng.normal(0, 1e-3, N_POINTS)).astype("<f4")
            h = prefix.copy()
            h.update(y.tobytes())
            spectra.append({"id": i, "sample_id": (i - 1) // 2 + 1,
                            "instrument_id": instruments[i % len(instruments)], "axis_id": 1,
                            "acquired_at": T0 + timedelta(minutes=i), "data": y.tobytes(),
                            "sha256": h.hexdigest(), "source_file": "bulk.csv",
                            "operator": "op", "imported_by_id": ana.id, "created_at": T0})
            vouched.append([i, h.hexdigest()])
            if len(spectra) == 1000:
                bulk(s, Spectrum, spectra)
                chain.add(T0 + timedelta(minutes=i), ana.id, ana.name, "import_spectra",
                          "spectrum_import", None, {"imported": 1000, "hashes": {"spectrum": vouched}})
                spectra, vouched = [], []

        # selection runs and picks ----------------------------------------------------------
        referenced = rng.choice(np.arange(1, N_SAMPLES + 1), N_REFERENCED, replace=False)
        pick_of: dict[int, int] = {}
        runs, picks = [], []
        for r in range(1, N_RUNS + 1):
            runs.append({"id": r, "created_at": T0 + timedelta(days=20, hours=r),
                         "user_id": mgr.id, "method": "kennard_stone", "parameters": {},
                         "property_codes": ["RON"], "pool_sha256": "0" * 64, "pool_size": 5000,
                         "total_cost": 0.0, "state": "answered", "benefit": {}})
            for k in range(PICKS_PER_RUN):
                pid = len(picks) + 1
                sid = int(referenced[(r - 1) * PICKS_PER_RUN + k])
                picks.append({"id": pid, "run_id": r, "sample_id": sid, "rank": k + 1,
                              "cost": 150.0, "cumulative_cost": 150.0 * (k + 1),
                              "reason": "maximin distance", "rationale": {}})
                pick_of[sid] = pid
        bulk(s, SelectionRun, runs)
        bulk(s, SelectionPick, picks)
        for r in runs:
            chain.add(r["created_at"], mgr.id, mgr.name, "selection_run", "selection_run", r["id"],
                      {"picks": PICKS_PER_RUN})

        # reference results and corrections --------------------------------------------------
        results, vouched = [], []
        value_of: dict[int, float] = {}
        tested = T0 + timedelta(days=30)
        for k, sid in enumerate(referenced, 1):
            sid = int(sid)
            v = round(float(rng.uniform(88, 100)), 1)
            row = {"id": k, "sample_id": sid, "method_id": method, "value": v, "lab": "Lab A",
                   "tested_at": tested, "operator": "eng", "comment": "", "status": "valid",
                   "status_reason": "", "supersedes_id": None,
                   "selection_pick_id": pick_of.get(sid), "imported_by_id": ana.id,
                   "created_at": tested}
            row["sha256"] = reference_result_hash(SimpleNamespace(**row))
            results.append(row)
            vouched.append([k, row["sha256"]])
            value_of[sid] = v
            if len(vouched) == 1000:
                chain.add(tested, ana.id, ana.name, "import_references", "reference_import",
                          None, {"n_results": 1000, "hashes": {"reference_result": vouched}})
                vouched = []
        result_of = {r["sample_id"]: r["id"] for r in results}
        for k in range(N_CORRECTED):
            old = results[k]
            old["status"], old["status_reason"] = "superseded", "superseded by correction"
            new = dict(old, id=N_REFERENCED + k + 1, value=old["value"] + 0.1, status="valid",
                       status_reason="", supersedes_id=old["id"], comment="correction")
            new["sha256"] = reference_result_hash(SimpleNamespace(**new))
            results.append(new)
            result_of[new["sample_id"]] = new["id"]
            value_of[new["sample_id"]] = new["value"]
            chain.add(tested + timedelta(hours=1, seconds=k), ana.id, ana.name,
                      "correct_reference", "reference_result", new["id"],
                      {"supersedes": old["id"], "hashes": {"reference_result": [
                          [old["id"], old["sha256"]], [new["id"], new["sha256"]]]}})
        bulk(s, ReferenceResult, [r for r in results if r["supersedes_id"] is None])
        bulk(s, ReferenceResult, [r for r in results if r["supersedes_id"] is not None])

        # calibration sets, models, validations, signatures, deployments ----------------------
        sets, members, models, changes, validations, sigs, deps = [], [], [], [], [], [], []
        when = T0 + timedelta(days=40)
        stats = ValidationStatistics(n=30, bias=0.01, sep=0.4, rmsep=0.4, slope=1.0, intercept=0.0,
                                     r2=0.97, bias_t=0.1, bias_p=0.9, reproducibility=0.7)
        criteria = AcceptanceCriteria(max_sep_over_sigma_r=2.0)
        for m in range(1, N_MODELS + 1):
            chosen = sorted(int(v) for v in rng.choice(referenced, SET_SIZE, replace=False))
            mem = [{"set_id": m, "sample_id": sid, "role": "val" if j % 5 == 0 else "cal",
                    "reference_value": value_of[sid], "reference_result_ids": [result_of[sid]],
                    "spectrum_ids": [2 * sid - 1, 2 * sid]} for j, sid in enumerate(chosen)]
            cs = {"id": m, "name": f"RON-SET-{m}", "property_id": ron, "grade_id": grade,
                  "description": "", "validation_rule": "listed", "n_cal": SET_SIZE * 4 // 5,
                  "n_val": SET_SIZE // 5, "frozen": True, "created_by_id": mgr.id,
                  "created_at": when + timedelta(days=m)}
            cs["sha256"] = calibration_set_hash(SimpleNamespace(**cs),
                                                [SimpleNamespace(**r) for r in mem])
            sets.append(cs)
            members += mem
            blob = rng.bytes(300_000)
            t_model = cs["created_at"] + timedelta(hours=1)
            models.append({"id": m, "label": f"RON-BULK-v{m}", "property_id": ron,
                           "grade_id": grade, "family": "pls1",
                           "recipe": [{"step": "savgol", "window_length": 11, "polyorder": 2,
                                       "deriv": 1}], "n_components": 8,
                           "cv": {"rmsecv": [0.5] * 12, "method": "kfold", "n_folds": 10,
                                  "selection_rule": "haaland-thomas"},
                           "artifact": blob, "artifact_sha256": artifact_hash(blob), "axis_id": 1,
                           "calibration_set_id": m, "state": "active", "author_id": ana.id,
                           "created_at": t_model, "last_validated_at": t_model + timedelta(hours=1)})
            val = {"id": m, "model_version_id": m, "calibration_set_id": m, "user_id": rev.id,
                   "kind": "initial", "n": 30, "bias": 0.01, "sep": 0.4, "rmsep": 0.4,
                   "slope": 1.0, "intercept": 0.0, "r2": 0.97, "bias_t": 0.1, "bias_p": 0.9,
                   "sep_over_sigma_r": stats.sep_over_sigma_r, "passed": True,
                   "criteria": {**criteria.to_json(), "rule": criteria.rule_text()},
                   "statistics": stats.to_json(), "reasons": [],
                   "created_at": t_model + timedelta(hours=1)}
            val["sha256"] = validation_record_hash(SimpleNamespace(**val))
            validations.append(val)
            parts = {"artifact_sha256": models[-1]["artifact_sha256"],
                     "validation_record_sha256": val["sha256"], "calibration_set_sha256": cs["sha256"]}
            sig = {"id": m, "user_id": rev.id, "meaning": "approved as reviewer", "reason": "ok",
                   "signed_at": t_model + timedelta(hours=2), "entity_type": "model_version",
                   "entity_id": m, "signed_parts": parts, "signed_sha256": signed_content_hash(parts)}
            sigs.append(sig)
            for k, (a, b, who, sg) in enumerate((("draft", "validated", rev, None),
                                                 ("validated", "in_review", ana, None),
                                                 ("in_review", "approved", rev, m),
                                                 ("approved", "active", mgr, None))):
                changes.append({"model_version_id": m, "from_state": a, "to_state": b,
                                "user_id": who.id, "reason": "", "signature_id": sg,
                                "occurred_at": t_model + timedelta(hours=1 + k)})
            deps.append({"model_version_id": m, "instrument_id": instruments[m % len(instruments)],
                         "state": "active", "deployed_at": t_model + timedelta(hours=4),
                         "deployed_by_id": mgr.id})
            chain.add(cs["created_at"], mgr.id, mgr.name, "calset_create", "calibration_set", m,
                      {"name": cs["name"], "hashes": {"calibration_set": [[m, cs["sha256"]]]}})
            chain.add(t_model, ana.id, ana.name, "model_train", "model_version", m,
                      {"label": models[-1]["label"],
                       "hashes": {"model_version": [[m, models[-1]["artifact_sha256"]]]}})
            chain.add(t_model + timedelta(hours=1), rev.id, rev.name, "model_validate",
                      "model_version", m, {"hashes": {"validation_record": [[m, val["sha256"]]]}})
            chain.add(t_model + timedelta(hours=3), rev.id, rev.name, "model_approve",
                      "model_version", m,
                      {"hashes": {"signature": [[m, signature_hash(SimpleNamespace(**sig))]]}})
            chain.add(t_model + timedelta(hours=4), mgr.id, mgr.name, "model_activate",
                      "model_version", m, {})
        bulk(s, CalibrationSet, sets)
        bulk(s, CalibrationMember, members)
        bulk(s, ModelVersion, models, chunk=10)
        bulk(s, ValidationRecord, validations)
        bulk(s, Signature, sigs)
        bulk(s, ModelStateChange, changes)
        bulk(s, Deployment, deps)
        qc = [{"instrument_id": instruments[k % len(instruments)],
               "model_version_id": k % N_MODELS + 1, "property_id": ron, "material": "QC-A",
               "known_value": 95.0, "measured_value": 95.0 + float(rng.normal(0, 0.2)),
               "measured_at": T0 + timedelta(days=100, hours=k), "user_id": ana.id,
               "signals": []} for k in range(500)]
        bulk(s, QCResult, qc)
        bulk(s, RevalidationTrigger, [{"model_version_id": k + 1, "kind": "qc_signal",
                                       "detail": {}, "raised_at": T0 + timedelta(days=120)}
                                      for k in range(0, N_MODELS, 5)])

        # predictions, one predict event each until the chain reaches N_EVENTS -------------
        n_pred_events = N_EVENTS - chain.seq
        preds = []
        start = T0 + timedelta(days=100)
        for idx in np.array_split(np.arange(1, N_PREDICTIONS + 1), n_pred_events):
            # one predict event per call, naming the model version as the service does
            mid = int(rng.integers(1, N_MODELS + 1))
            at = start + timedelta(minutes=int(idx[0]))
            rows = []
            for k in idx:
                sid = int(rng.integers(1, N_SPECTRA + 1))
                p = {"id": int(k), "spectrum_id": sid, "model_version_id": mid,
                     "instrument_id": instruments[sid % len(instruments)],
                     "value": round(float(rng.uniform(88, 100)), 4),
                     "diagnostics": {"leverage": 0.1, "q": 1e-4}, "flags": [],
                     "predicted_at": at, "user_id": ana.id}
                preds.append(p)
                rows.append([p["id"], sid, p["value"], p["flags"]])
            chain.add(at, ana.id, ana.name, "predict", "model_version", mid, {"predictions": rows})
        bulk(s, Prediction, preds)
        bulk(s, AuditEvent, chain.rows)
        n_events = chain.seq
        auditor = actors["auditor"]
    # Planner statistics, as autovacuum (PostgreSQL) or a routine ANALYZE would have them on a
    # registry that grew over months; a bulk load leaves none.
    with engine.connect() as conn:
        conn.exec_driver_sql("ANALYZE")
        conn.commit()
    engine.dispose()
    return {"auditor": auditor, "events": n_events}


def percentile(values, q):
    return float(np.percentile(np.asarray(values), q))


def time_engine(name: str, url: str) -> None:
    t0 = time.perf_counter()
    info = build(url)
    print(f"[{name}] built in {time.perf_counter() - t0:.1f} s: {N_PREDICTIONS:,} predictions, "
          f"{N_SPECTRA:,} spectra × {N_POINTS} points, {N_MODELS} model versions, "
          f"{N_MODELS} sets × {SET_SIZE} samples, {info['events']:,} audit events", flush=True)
    engine = make_engine(url)
    pyrng = random.Random(1)
    ids = [pyrng.randint(1, N_PREDICTIONS) for _ in range(N_TRACES)]
    for pid in ids[:3]:  # warm-up: statement compilation, caches of the database itself
        with session_scope(engine) as s:
            audit_svc.trace(s, info["auditor"], prediction_id=pid)
    trace_ms = []
    n_members = 0
    for pid in ids:
        t = time.perf_counter()
        with session_scope(engine) as s:
            doc = audit_svc.trace(s, info["auditor"], prediction_id=pid)
        trace_ms.append((time.perf_counter() - t) * 1000)
        n_members = len(doc["calibration_set"]["members"])
    ref_ms = []
    for pid in ids:
        t = time.perf_counter()
        with session_scope(engine) as s:
            s.get(Prediction, pid)
        ref_ms.append((time.perf_counter() - t) * 1000)
    med, p95 = statistics.median(trace_ms), percentile(trace_ms, 95)
    ref = statistics.median(ref_ms)
    print(f"[{name}] trace of one prediction ({n_members} calibration samples each, "
          f"{N_TRACES} random predictions): median {med:.1f} ms, p95 {p95:.1f} ms; "
          f"median / {GOAL_MS:.0f} ms goal = {med / GOAL_MS:.2f} "
          f"[{'met' if med < GOAL_MS else 'NOT met'}]; "
          f"× {med / ref:.0f} a primary-key lookup ({ref:.2f} ms)", flush=True)
    t = time.perf_counter()
    with session_scope(engine) as s:
        report = verify_registry(s)
    elapsed = time.perf_counter() - t
    print(f"[{name}] audit verify: {report.n_events:,} events, "
          + ", ".join(f"{n:,} {k}" for k, n in report.checked.items())
          + f": {elapsed:.1f} s (/{VERIFY_GOAL_S:.0f} s = {elapsed / VERIFY_GOAL_S:.2f}) "
          f"intact={report.intact}", flush=True)
    if not report.intact:
        for p in report.problems[:5]:
            print("   ", p.text())
    engine.dispose()


def main() -> int:
    print("Trace and audit-verify benchmark; BLAS threads capped at 1; OPENBLAS_CORETYPE="
          f"{os.environ.get('OPENBLAS_CORETYPE', '(unset)')}")
    with threadpool_limits(limits=1), tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'bench.db'}"
        upgrade(url)
        time_engine("sqlite", url)
    try:
        from tests.conftest import fresh_pg_database

        import pytest

        try:
            pg, drop = fresh_pg_database()
        except pytest.skip.Exception as exc:
            print(f"[postgresql] skipped: {exc}")
            return 0
        try:
            upgrade(pg)
            with threadpool_limits(limits=1):
                time_engine("postgresql", pg)
        finally:
            from registry.storage.engine import dispose_engines

            dispose_engines()
            drop()
    except ImportError as exc:
        print(f"[postgresql] skipped: {exc}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
