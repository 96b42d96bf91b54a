"""Models and migrations agree, on SQLite and PostgreSQL (Alembic autogenerate comparison,
plus the CHECK constraints, which autogenerate does not compare)."""

from __future__ import annotations

import re
from contextlib import contextmanager

import pytest
import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlmodel import select

from registry.chemometrics.family_names import ModelFamily
from registry.lifecycle.permissions import Action
from registry.lifecycle.states import DeploymentState, ModelState
from registry.storage.engine import downgrade, make_engine, session_scope, upgrade
from registry.storage.models import (CalibrationSet, Deployment, Instrument, ModelStateChange,
                                     ModelVersion, Property, ReferenceMethod, ReferenceResult,
                                     ResultStatus, Sample, Site, SpectralAxis, metadata)


def _diff(url: str) -> list:
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            return compare_metadata(ctx, metadata)
    finally:
        engine.dispose()


def test_head_schema_matches_models(any_url):
    assert _diff(any_url) == []


def _names_in(sqltext: str) -> set[str]:
    # SQLite gives the CHECK as written, PostgreSQL as "= ANY (ARRAY['a'::character varying, ...])":
    # the quoted names are what both say.
    return set(re.findall(r"'([^']*)'", str(sqltext)))


def test_check_constraints_match_models(any_url):
    expected = {(t.name, c.name): _names_in(c.sqltext) for t in metadata.sorted_tables
                for c in t.constraints if isinstance(c, sa.CheckConstraint)}
    assert {name for _, name in expected} >= {
        "ck_model_version_state", "ck_model_state_change_from_state",
        "ck_model_state_change_to_state", "ck_deployment_state", "ck_reference_result_status",
        "ck_audit_event_action", "ck_model_version_family"}
    engine = make_engine(any_url)
    try:
        inspector = sa.inspect(engine)
        found = {(t, c["name"]): _names_in(c["sqltext"]) for t in inspector.get_table_names()
                 for c in inspector.get_check_constraints(t)}
    finally:
        engine.dispose()
    assert found == expected
    assert expected[("model_version", "ck_model_version_state")] == {s.value for s in ModelState}
    assert expected[("audit_event", "ck_audit_event_action")] == {a.value for a in Action}
    assert expected[("model_version", "ck_model_version_family")] == {f.value for f in ModelFamily}


def _add_rows(engine, actors) -> dict[str, int]:
    """One valid row in every table with a CHECK, written straight through the tables;
    returns their ids by table."""
    with session_scope(engine) as s:
        user_id = actors["analyst"].id
        prop = s.exec(select(Property)).first()
        method = s.exec(select(ReferenceMethod).where(
            ReferenceMethod.property_id == prop.id)).first()
        site, inst = s.exec(select(Site)).first(), s.exec(select(Instrument)).first()
        axis = SpectralAxis(n_points=1, first_x=1.0, last_x=1.0, values=b"", sha256="axis")
        sample = Sample(site_id=site.id, external_id="S-1")
        cs = CalibrationSet(name="set", property_id=prop.id, sha256="set", created_by_id=user_id)
        s.add_all([axis, sample, cs])
        s.flush()
        result = ReferenceResult(sample_id=sample.id, method_id=method.id, value=1.0, sha256="r")
        mv = ModelVersion(label="m", property_id=prop.id, artifact=b"", artifact_sha256="a",
                          axis_id=axis.id, calibration_set_id=cs.id, author_id=user_id)
        s.add_all([result, mv])
        s.flush()
        change = ModelStateChange(model_version_id=mv.id, from_state=ModelState.DRAFT,
                                  to_state=ModelState.VALIDATED, user_id=user_id)
        dep = Deployment(model_version_id=mv.id, instrument_id=inst.id, deployed_by_id=user_id)
        s.add_all([change, dep])
        s.flush()
        return {"model_version": mv.id, "model_state_change": change.id, "deployment": dep.id,
                "reference_result": result.id}


# (table, column, another known name): the known name must be accepted, an unknown one refused.
_CHECKED = [("model_version", "state", ModelState.VALIDATED),
            ("model_state_change", "from_state", ModelState.IN_REVIEW),
            ("model_state_change", "to_state", ModelState.APPROVED),
            ("deployment", "state", DeploymentState.RETIRED),
            ("reference_result", "status", ResultStatus.SUSPECT)]


def test_database_refuses_unknown_states_and_actions(any_url):
    from tests.conftest import populate_basics

    engine = make_engine(any_url)
    try:
        ids = _add_rows(engine, populate_basics(engine))
        for table, column, known in _CHECKED:
            update = f"UPDATE {table} SET {column} = :v WHERE id = :i"
            with engine.begin() as conn:
                conn.execute(sa.text(update), {"v": known.value, "i": ids[table]})
            with pytest.raises(sa.exc.IntegrityError, match=f"ck_{table}_{column}"):
                with engine.begin() as conn:
                    conn.execute(sa.text(update), {"v": "made_up", "i": ids[table]})
        # The audit trail refuses UPDATE, so an unknown action is tried on a copy of event 1
        # (its hash made unique with a leading non-hex letter).
        copy = ("INSERT INTO audit_event (id, occurred_at, user_id, user_name, action, "
                "entity_type, entity_id, payload, prev_hash, hash) SELECT id + :k, occurred_at, "
                "user_id, user_name, :v, entity_type, entity_id, payload, prev_hash, "
                ":suffix || substr(hash, 2) FROM audit_event WHERE id = 1")
        with engine.begin() as conn:
            conn.execute(sa.text(copy), {"v": Action.VIEW.value, "k": 1000, "suffix": "x"})
        with pytest.raises(sa.exc.IntegrityError, match="ck_audit_event_action"):
            with engine.begin() as conn:
                conn.execute(sa.text(copy), {"v": "made_up", "k": 2000, "suffix": "y"})
    finally:
        engine.dispose()


@contextmanager
def _registry_at(kind: str, revision: str, tmp_path):
    """An empty registry migrated to ``revision`` on SQLite or PostgreSQL; yields its URL."""
    from tests.conftest import fresh_pg_database

    if kind == "sqlite":
        url = f"sqlite:///{tmp_path / 'registry.db'}"
        upgrade(url, revision)
        yield url
        return
    url, drop = fresh_pg_database()
    try:
        upgrade(url, revision)
        yield url
    finally:
        from registry.storage.engine import dispose_engines

        dispose_engines()
        drop()


@pytest.mark.parametrize("kind", ["sqlite", "postgresql"])
def test_upgrading_a_used_registry_keeps_its_audit_trail(kind, tmp_path):
    """A registry with audit events written before the CHECK constraints (revision 0002) is
    upgraded: the chain still verifies and the trail is still append-only."""
    from registry.lineage.verify import verify_registry
    from tests.conftest import populate_basics

    with _registry_at(kind, "0002", tmp_path) as url:
        engine = make_engine(url)
        try:
            populate_basics(engine)
            with session_scope(engine) as s:
                before = verify_registry(s)
            upgrade(url)
            assert _diff(url) == []
            with session_scope(engine) as s:
                after = verify_registry(s)
            assert before.intact and after.intact
            assert (after.n_events, after.head) == (before.n_events, before.head)
            for statement in ("UPDATE audit_event SET user_name = 'x'", "DELETE FROM audit_event"):
                with pytest.raises(sa.exc.DBAPIError, match="append-only"):
                    with engine.begin() as conn:
                        conn.exec_driver_sql(statement)
        finally:
            engine.dispose()


def test_downgrade_to_base_and_upgrade_again(any_url):
    downgrade(any_url, "base")
    engine = make_engine(any_url)
    try:
        names = set(sa.inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()
    assert names == set()
    upgrade(any_url)
    assert _diff(any_url) == []


@pytest.mark.parametrize("statement", [
    "UPDATE audit_event SET action = 'x'",
    "DELETE FROM audit_event",
])
def test_database_refuses_audit_changes(any_url, statement):
    from tests.conftest import populate_basics

    engine = make_engine(any_url)
    try:
        populate_basics(engine)
        with pytest.raises(sa.exc.DBAPIError, match="append-only"):
            with engine.begin() as conn:
                conn.exec_driver_sql(statement)
        with engine.connect() as conn:
            assert conn.exec_driver_sql("SELECT count(*) FROM audit_event").scalar() > 0
    finally:
        engine.dispose()


def test_sqlite_runs_with_foreign_keys_and_wal(sqlite_url):
    engine = make_engine(sqlite_url)
    try:
        with engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
    finally:
        engine.dispose()
