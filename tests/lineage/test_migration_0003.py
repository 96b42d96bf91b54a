"""Revision 0003 on a registry that holds validation records written before it.

Before 0003 the ``sep`` column held the RMSEP and ``sdv`` the SEP (the bias-corrected
standard deviation of the errors, ISO 12099:2017), ``sep_over_r`` was RMSEP/R and the
property criteria used ``max_sep_over_reproducibility``. The registry is taken down to
0002, a record is written there exactly as the code before 0003 wrote it (columns, hashed
JSON of the old layout, its audit event), and the registry is upgraded again. The
record's numbers must read back under their right names, its rule must still say what it
was judged by, and ``audit verify`` and the signatures must still hold: the content hash
covers the stored JSON, which the migration leaves as it was.
"""

from __future__ import annotations

import json
import math
from types import SimpleNamespace

import jsonschema
import pytest
import sqlalchemy as sa
from sqlmodel import select

from registry.lifecycle.permissions import Action
from registry.lineage.content_hashes import validation_record_hash
from registry.lineage.trace import build_trace, load_schema
from registry.lineage.verify import verify_registry
from registry.services import models
from registry.services.context import audit
from registry.services.properties import acceptance_for
from registry.storage.engine import dispose_engines, downgrade, make_engine, session_scope, upgrade
from registry.storage.models import Property

LIMIT_FACTOR = 1.96 * math.sqrt(2.0)  # R = 1.96·√2·σ_R (ISO 5725-6:1994, 4.1.4; ASTM E177)
OLD_CRITERIA = {"bias_alpha": 0.05, "max_sep_over_reproducibility": 0.1, "min_samples": 20,
                "min_samples_per_component": 4, "min_r2": None, "max_abs_bias": None}


def _write_record_as_before_0003(url: str, info: dict) -> dict:
    """At revision 0002: one more validation record of the model, stored as the code
    before 0003 stored it (statistics layout 1: sdv = SEP, sep = rmsep = RMSEP)."""
    engine = make_engine(url)
    try:
        with engine.begin() as conn:
            first = conn.execute(sa.text(
                "SELECT model_version_id, calibration_set_id, user_id, statistics FROM "
                "validation_record ORDER BY id LIMIT 1")).one()
            stats = first.statistics if isinstance(first.statistics, dict) else json.loads(first.statistics)
            sep, rmsep, R = stats["sep"], stats["rmsep"], stats["reproducibility"]
            old_stats = {k: v for k, v in stats.items()
                         if k not in ("layout", "sigma_R", "sep_over_sigma_r", "sep_95")}
            old_stats.update(sdv=sep, sep=rmsep, rmsep=rmsep)
            reasons = [f"SEP {rmsep:.4g} exceeds 0.1 x reproducibility {R:.4g}"]
            old = SimpleNamespace(model_version_id=first.model_version_id,
                                  calibration_set_id=first.calibration_set_id, kind="local",
                                  statistics=old_stats, criteria=OLD_CRITERIA,
                                  passed=False, reasons=reasons)
            sha = validation_record_hash(old)
            conn.execute(sa.text(
                "INSERT INTO validation_record (model_version_id, calibration_set_id, user_id, "
                "kind, n, bias, sdv, sep, rmsep, slope, intercept, r2, bias_t, bias_p, sep_over_r, "
                "passed, criteria, statistics, reasons, sha256, created_at) VALUES (:mv, :cs, :u, "
                ":kind, :n, :bias, :sdv, :sep, :rmsep, :slope, :intercept, :r2, :bias_t, :bias_p, "
                ":sor, :passed, :criteria, :statistics, :reasons, :sha, :at)"),
                {"mv": old.model_version_id, "cs": old.calibration_set_id, "u": first.user_id,
                 "kind": old.kind, "n": stats["n"], "bias": stats["bias"], "sdv": sep,
                 "sep": rmsep, "rmsep": rmsep, "slope": stats["slope"],
                 "intercept": stats["intercept"], "r2": stats["r2"], "bias_t": stats["bias_t"],
                 "bias_p": stats["bias_p"], "sor": rmsep / R, "passed": False,
                 "criteria": json.dumps(old.criteria), "statistics": json.dumps(old_stats),
                 "reasons": json.dumps(reasons), "sha": sha,
                 "at": "2026-11-30 10:00:00.000000"})
            rid = conn.execute(sa.text("SELECT max(id) FROM validation_record")).scalar()
            conn.execute(sa.text("UPDATE property SET acceptance = :a WHERE code = 'RON'"),
                         {"a": json.dumps({"max_sep_over_reproducibility": 0.8})})
        with session_scope(engine) as s:  # the audit event validate_model wrote
            audit(s, info["actors"]["reviewer"], Action.MODEL_VALIDATE,
                  entity_type="model_version", entity_id=old.model_version_id,
                  data={"label": info["model"], "passed": False, "reasons": reasons,
                        "rmsep": rmsep, "bias": stats["bias"], "n": stats["n"], "record_id": rid},
                  hashes={"validation_record": [(rid, sha)]})
    finally:
        engine.dispose()
    return {"id": rid, "sep": sep, "rmsep": rmsep, "R": R, "sha": sha}


def _check_upgrade_keeps_old_records(url: str, info: dict) -> None:
    engine = make_engine(url)
    with session_scope(engine) as s:
        before = models.model_detail(s, info["actors"]["auditor"], info["model"])["validations"][0]
    engine.dispose()
    dispose_engines()

    downgrade(url, "0002")
    old = _write_record_as_before_0003(url, info)
    engine = make_engine(url)
    with session_scope(engine) as s:
        assert verify_registry(s).intact  # the registry as the old code left it
    engine.dispose()
    upgrade(url)

    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            row = conn.execute(sa.text(
                "SELECT sep, rmsep, sep_over_sigma_r, sha256 FROM validation_record WHERE id = :i"),
                {"i": old["id"]}).one()
        # the stored SEP moved into `sep`; the RMSEP stays in `rmsep`; the ratio is SEP/σ_R
        assert row.sep == pytest.approx(old["sep"], rel=1e-12)
        assert row.rmsep == pytest.approx(old["rmsep"], rel=1e-12)
        assert row.sep_over_sigma_r == pytest.approx(old["sep"] * LIMIT_FACTOR / old["R"], rel=1e-9)
        assert row.sha256 == old["sha"]
        with session_scope(engine) as s:
            report = verify_registry(s)
            assert report.intact, [p.message for p in report.problems]
            assert report.checked["validation_record"] == 2
            # the admin's override keeps its factor under the new name
            prop = s.exec(select(Property).where(Property.code == "RON")).one()
            assert prop.acceptance == {"max_sep_over_sigma_r": 0.8}
            assert acceptance_for(prop).max_sep_over_sigma_r == 0.8
            detail = models.model_detail(s, info["actors"]["auditor"], info["model"])
            doc = build_trace(s, model=info["model"])
        new, legacy = detail["validations"]
        # the record written at head round-trips through downgrade and upgrade unchanged
        assert {k: new[k] for k in ("sep", "rmsep", "bias", "sep_over_sigma_r", "rule")} == \
               {k: before[k] for k in ("sep", "rmsep", "bias", "sep_over_sigma_r", "rule")}
        assert "SEP ≤ 2.5·σ_R" in new["rule"]
        assert legacy["sep"] == pytest.approx(old["sep"]) and legacy["rmsep"] == old["rmsep"]
        assert legacy["rule"].endswith("RMSEP ≤ 0.1·R (rule before revision 0003)")
        assert legacy["sep_95"] == pytest.approx(1.96 * old["sep"])
        validator = jsonschema.Draft202012Validator(load_schema())
        errors = [f"{list(e.path)}: {e.message}" for e in validator.iter_errors(doc)]
        assert not errors, errors[:5]
        m = doc["model"]
        assert [v["hash_ok"] for v in m["validations"]] == [True, True]
        assert doc["integrity"]["signatures_match_content"] is True
        assert m["cv"]["method"] == "venetian"  # the default folds (issue: no contiguous blocks)
    finally:
        engine.dispose()
        dispose_engines()


def test_upgrade_keeps_old_records_readable_and_verifiable_sqlite(lineage_sqlite):
    url, info = lineage_sqlite
    _check_upgrade_keeps_old_records(url, info)


def test_upgrade_keeps_old_records_readable_and_verifiable_postgresql(lineage_pg):
    url, info = lineage_pg
    _check_upgrade_keeps_old_records(url, info)
