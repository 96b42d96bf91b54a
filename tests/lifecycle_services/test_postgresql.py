"""The signed lifecycle, QC signal and due list on PostgreSQL (the multi-site engine).

Same checks as the SQLite tests beside this file, in one pass: sources are named there
(21 CFR Part 11 §11.50; NIST/SEMATECH e-Handbook §6.3.2 chart limits; tests/lifecycle/brief.py).
"""

from __future__ import annotations

from sqlalchemy import text
from sqlmodel import select

from registry.services import lifecycle, qc, revalidation
from registry.storage.engine import dispose_engines, make_engine, session_scope
from registry.storage.models import Signature
from tests.conftest import fresh_pg_database
from tests.lifecycle_services import steps
from tests.lifecycle_services.conftest import Reg, build_registry


def test_lifecycle_on_postgresql(tmp_path):
    url, drop = fresh_pg_database()
    engine = None
    try:
        built = build_registry(url, tmp_path)
        engine = make_engine(url)
        reg = Reg(url=url, path=tmp_path, engine=engine, actors=built["actors"], v1=built["v1"],
                  v2=built["v2"], tmp=tmp_path)
        steps.in_service(reg, reg.v1)
        with session_scope(engine) as s:
            for i in range(20):
                qc.add_qc_result(s, reg.actors["analyst"], instrument="IR-100", material="QC-A",
                                 value=90.0 + 0.2 * (i % 2), known_value=90.1 if i == 0 else None,
                                 property_code="RON")
            # 90.1 + 4σ̂ with σ̂ = MR̄/1.128 (e-Handbook §6.3.2): beyond the 3σ limit.
            r = qc.add_qc_result(s, reg.actors["analyst"], instrument="IR-100", material="QC-A",
                                 value=90.1 + 4 * 0.2 / 1.128)
            assert "beyond_3_sigma" in {x["rule"] for x in r.signals}
        with session_scope(engine) as s:
            [row] = revalidation.due_list(s, reg.actors["auditor"])
            assert row["overdue"] and any("qc_signal" in x for x in row["reasons"])
            sigs = s.exec(select(Signature).order_by(Signature.id)).all()
            assert [lifecycle.signature_status(s, g) for g in sigs] == ["intact", "intact"]
        with engine.begin() as conn:
            conn.execute(text("UPDATE calibration_member SET reference_value = reference_value + 1 "
                              "WHERE id = (SELECT MIN(id) FROM calibration_member)"))
        with session_scope(engine) as s:
            sigs = s.exec(select(Signature).order_by(Signature.id)).all()
            assert [lifecycle.signature_status(s, g) for g in sigs] == ["broken", "broken"]
    finally:
        if engine is not None:
            engine.dispose()
        dispose_engines()
        drop()
