"""``audit verify`` catches alterations made with raw SQL behind the registry's back.

The tamper cases are the ones the issue lists (change a reference value, a
spectrum byte, a model artifact byte, an audit payload; delete an audit event;
reorder two events), plus the harder ones the chain's vouched hashes exist for
(data changed together with its hash column, rows inserted or deleted). Each
runs on SQLite (a private copy of the registry file, changes committed) and on
PostgreSQL (inside a transaction that is rolled back afterwards). To touch the
audit table the append-only trigger is dropped/disabled first, as an attacker
with database access would do.
"""

from __future__ import annotations

import hashlib
import json
from contextlib import contextmanager

import pytest
import sqlalchemy as sa
from sqlmodel import Session

from registry.errors import PermissionDenied
from registry.lineage.audit_chain import GENESIS
from registry.lineage.verify import verify_registry
from registry.services import audit as audit_svc
from registry.spectra.record import content_sha256
from registry.storage.engine import make_engine, session_scope
from registry.lineage.content_hashes import reference_result_hash


def _scalar(conn, sql, **kw):
    return conn.execute(sa.text(sql), kw).scalar()


def _open_audit_table(conn) -> None:
    if conn.dialect.name == "sqlite":
        conn.exec_driver_sql("DROP TRIGGER IF EXISTS trg_audit_event_no_update")
        conn.exec_driver_sql("DROP TRIGGER IF EXISTS trg_audit_event_no_delete")
    else:
        conn.exec_driver_sql("ALTER TABLE audit_event DISABLE TRIGGER USER")


def _flip_byte(blob: bytes) -> bytes:
    b = bytearray(blob)
    b[len(b) // 2] ^= 0x01
    return bytes(b)


# Each case alters the registry with raw SQL and returns the (kind, id) verify must name.
def change_reference_value(conn, info):
    rid = info["corrected_to"]  # the corrected result, used by the calibration set
    conn.execute(sa.text("UPDATE reference_result SET value = value + 0.5 WHERE id = :i"), {"i": rid})
    return "reference_result", rid


def change_spectrum_byte(conn, info):
    blob = _scalar(conn, "SELECT data FROM spectrum WHERE id = 7")
    conn.execute(sa.text("UPDATE spectrum SET data = :d WHERE id = 7"), {"d": _flip_byte(bytes(blob))})
    return "spectrum", 7


def change_artifact_byte(conn, info):
    mid = info["model_id"]
    blob = _scalar(conn, "SELECT artifact FROM model_version WHERE id = :i", i=mid)
    conn.execute(sa.text("UPDATE model_version SET artifact = :d WHERE id = :i"),
                 {"d": _flip_byte(bytes(blob)), "i": mid})
    return "model_version", mid


def change_audit_payload(conn, info):
    _open_audit_table(conn)
    seq, payload = conn.execute(sa.text(
        "SELECT id, payload FROM audit_event WHERE action = 'calset_create'")).one()
    body = json.loads(payload)
    body["data"]["n_val"] += 1  # claim one more validation sample than was frozen
    conn.execute(sa.text("UPDATE audit_event SET payload = :p WHERE id = :i"),
                 {"p": json.dumps(body, sort_keys=True, separators=(",", ":")), "i": seq})
    return "audit_event", seq


def delete_audit_event(conn, info):
    _open_audit_table(conn)
    conn.execute(sa.text("DELETE FROM audit_event WHERE id = 5"))
    return "audit_event", 6  # the gap shows at the next event


def reorder_audit_events(conn, info):
    _open_audit_table(conn)
    for a, b in ((5, -5), (6, 5), (-5, 6)):
        conn.execute(sa.text("UPDATE audit_event SET id = :b WHERE id = :a"), {"a": a, "b": b})
    return "audit_event", 5


ISSUE_CASES = [change_reference_value, change_spectrum_byte, change_artifact_byte,
               change_audit_payload, delete_audit_event, reorder_audit_events]


def change_spectrum_and_its_hash(conn, info):
    """Data and hash column changed consistently: only the chain's vouched hash catches it."""
    blob, axis = conn.execute(sa.text(
        "SELECT s.data, a.\"values\" FROM spectrum s JOIN spectral_axis a ON a.id = s.axis_id "
        "WHERE s.id = 9")).one()
    new = _flip_byte(bytes(blob))
    import numpy as np

    digest = content_sha256(np.frombuffer(bytes(axis), "<f8"), np.frombuffer(new, "<f4"))
    conn.execute(sa.text("UPDATE spectrum SET data = :d, sha256 = :h WHERE id = 9"),
                 {"d": new, "h": digest})
    return "spectrum", 9


def change_reference_and_its_hash(conn, info):
    from types import SimpleNamespace

    row = conn.execute(sa.text("SELECT * FROM reference_result WHERE id = 2")).mappings().one()
    r = SimpleNamespace(**dict(row))
    r.value = r.value - 1.0
    from registry.storage.types import as_utc
    from datetime import datetime

    r.tested_at = as_utc(r.tested_at if isinstance(r.tested_at, datetime)
                         else datetime.fromisoformat(r.tested_at))
    conn.execute(sa.text("UPDATE reference_result SET value = :v, sha256 = :h WHERE id = 2"),
                 {"v": r.value, "h": reference_result_hash(r)})
    return "reference_result", 2


def insert_result_behind_back(conn, info):
    conn.execute(sa.text(
        "INSERT INTO reference_result (sample_id, method_id, value, lab, tested_at, operator, "
        "comment, status, status_reason, sha256, created_at) SELECT sample_id, method_id, 99.9, "
        "lab, tested_at, operator, '', 'valid', '', sha256, created_at FROM reference_result "
        "WHERE id = 1"))
    return "reference_result", _scalar(conn, "SELECT max(id) FROM reference_result")


def delete_result_behind_back(conn, info):
    conn.execute(sa.text("DELETE FROM reference_result WHERE id = 30"))
    return "reference_result", 30


def change_prediction_value(conn, info):
    pid = info["prediction_ids"][1]
    conn.execute(sa.text("UPDATE prediction SET value = value + 1 WHERE id = :i"), {"i": pid})
    return "prediction", pid


def change_calibration_member(conn, info):
    conn.execute(sa.text("UPDATE calibration_member SET reference_value = reference_value + 0.3 "
                         "WHERE set_id = :s AND sample_id = 2"), {"s": info["calset_id"]})
    return "calibration_set", info["calset_id"]


def change_signature_meaning(conn, info):
    conn.execute(sa.text("UPDATE signature SET meaning = 'reviewed only' WHERE id = :i"),
                 {"i": info["signature_id"]})
    return "signature", info["signature_id"]


def change_validation_verdict(conn, info):
    conn.execute(sa.text("UPDATE validation_record SET passed = NOT passed WHERE id = 1"))
    return "validation_record", 1


MORE_CASES = [change_spectrum_and_its_hash, change_reference_and_its_hash,
              insert_result_behind_back, delete_result_behind_back, change_prediction_value,
              change_calibration_member, change_signature_meaning, change_validation_verdict]


def _verify_url(url):
    engine = make_engine(url)
    try:
        with session_scope(engine) as s:
            return verify_registry(s)
    finally:
        engine.dispose()


# --------------------------------------------------------------------------- SQLite
def test_untouched_registry_verifies(lineage_sqlite):
    url, info = lineage_sqlite
    report = _verify_url(url)
    assert report.intact, [p.text() for p in report.problems]
    assert report.first_broken_seq is None
    assert report.checked["spectrum"] == 160 and report.checked["prediction"] == 3
    # approval and activation are both signed
    assert report.checked["signature"] == 2 and report.checked["calibration_set"] == 1


def test_chain_matches_an_independent_recomputation(lineage_sqlite):
    # The issue defines hash = SHA-256 over previous hash + payload; recompute it with hashlib
    # (FIPS 180-4 SHA-256) straight from the table, without registry code.
    url, _ = lineage_sqlite
    engine = sa.create_engine(url)
    with engine.connect() as conn:
        rows = conn.execute(sa.text("SELECT id, payload, prev_hash, hash FROM audit_event "
                                    "ORDER BY id")).all()
    engine.dispose()
    prev = GENESIS
    for seq, payload, prev_hash, digest in rows:
        assert prev_hash == prev
        assert hashlib.sha256((prev + payload).encode("utf-8")).hexdigest() == digest
        assert json.loads(payload)["seq"] == seq
        prev = digest
    assert _verify_url(url).head == prev


def test_append_only_trigger_refuses_plain_edits(lineage_sqlite):
    url, _ = lineage_sqlite
    engine = sa.create_engine(url)
    with pytest.raises(sa.exc.DatabaseError):
        with engine.begin() as conn:
            conn.execute(sa.text("UPDATE audit_event SET user_name = 'x' WHERE id = 1"))
    engine.dispose()


@pytest.mark.parametrize("case", ISSUE_CASES + MORE_CASES, ids=lambda c: c.__name__)
def test_tampering_is_detected_on_sqlite(lineage_sqlite, case):
    url, info = lineage_sqlite
    engine = sa.create_engine(url)  # raw SQL, not the registry's engine
    with engine.begin() as conn:
        kind, entity_id = case(conn, info)
    engine.dispose()
    report = _verify_url(url)
    assert not report.intact
    assert (kind, entity_id) in report.entities(), [p.text() for p in report.problems]
    if kind == "audit_event":
        assert report.first_broken_seq == entity_id


def test_problems_name_the_sample(lineage_sqlite):
    url, info = lineage_sqlite
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        change_reference_value(conn, info)
        change_spectrum_byte(conn, info)
    engine.dispose()
    texts = {(p.entity_type, p.entity_id): p.text() for p in _verify_url(url).problems}
    # the corrected result belongs to the fourth sample; spectrum 7 is its first replicate
    assert "sample L0003" in texts[("reference_result", info["corrected_to"])]
    assert "sample L0003" in texts[("spectrum", 7)]


def test_verify_needs_the_auditor(registry):
    engine, actors = registry
    with session_scope(engine) as s:
        with pytest.raises(PermissionDenied):
            audit_svc.verify_registry(s, actors["analyst"])
        assert audit_svc.verify_registry(s, actors["auditor"]).intact


# --------------------------------------------------------------------------- PostgreSQL
@contextmanager
def _tampered_pg(url, case, info):
    """Tamper inside a transaction, verify through it, then roll everything back."""
    engine = sa.create_engine(url)
    with engine.connect() as conn:
        trans = conn.begin()
        try:
            target = case(conn, info)
            with Session(bind=conn) as session:
                yield target, verify_registry(session)
        finally:
            trans.rollback()
    engine.dispose()


@pytest.mark.postgres
@pytest.mark.parametrize("case", ISSUE_CASES + [change_spectrum_and_its_hash,
                                                insert_result_behind_back],
                         ids=lambda c: c.__name__)
def test_tampering_is_detected_on_postgresql(lineage_pg, case):
    url, info = lineage_pg
    with _tampered_pg(url, case, info) as ((kind, entity_id), report):
        assert not report.intact
        assert (kind, entity_id) in report.entities(), [p.text() for p in report.problems]
        if kind == "audit_event":
            assert report.first_broken_seq == entity_id
    assert _verify_url(url).intact  # rolled back: the shared registry is untouched
