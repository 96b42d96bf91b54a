"""A trained, validated registry built once per test session; each test gets its own copy.

Built through the services from the synthetic fuel generator (invented data; the
tests check registry behaviour): 80 referenced gasoline spectra on IR-100, a
calibration set frozen by the lab manager, version 1 trained by the analyst and
validated by the reviewer, version 2 trained and validated by a user holding both
the analyst and the reviewer role (to show that an author cannot approve their own
version even when their roles would allow it).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest
from sqlalchemy import func
from sqlmodel import select

from registry.services import admin, models
from registry.services.auth import actor_of
from registry.services.context import Actor
from registry.storage.engine import make_engine, session_scope, upgrade
from registry.storage.models import ENTITY_TABLES
from tests.conftest import PASSWORD, populate_basics
from tests.factories import (accept_small_test_models, copy_sqlite, referenced_registry,
                             trained_ron_version)

SECOND_SITE_ZONE = "America/Chicago"


@dataclass
class Reg:
    url: str
    path: Path
    engine: object
    actors: dict[str, Actor]
    v1: str  # authored by the analyst
    v2: str  # authored by the dual analyst+reviewer user
    tmp: Path

    def counts(self) -> dict[str, int]:
        """Rows in every table (audit events included)."""
        with session_scope(self.engine) as s:
            return {name: s.exec(select(func.count()).select_from(table)).one()
                    for name, table in ENTITY_TABLES.items()}


def build_registry(url: str, base: Path) -> dict:
    """Migrate ``url`` and fill it as described in the module docstring."""
    upgrade(url)
    engine = make_engine(url)
    actors = populate_basics(engine)
    with session_scope(engine) as s:
        root = actors["admin"]
        dual = admin.add_user(s, root, "dora", ["analyst", "reviewer"], PASSWORD)
        actors["dual"] = actor_of(dual)
        admin.add_site(s, root, "River Lab", timezone=SECOND_SITE_ZONE)
        admin.add_instrument(s, root, "IR-200", site="River Lab")
    info = referenced_registry(engine, actors, base, n=80)
    accept_small_test_models(engine, actors)
    v1 = trained_ron_version(engine, actors)
    v2 = trained_ron_version(engine, actors, author="dual", new_set=False)
    for label, who in ((v1, "reviewer"), (v2, "dual")):
        with session_scope(engine) as s:
            rec = models.validate_model(s, actors[who], label)
            assert rec.passed, rec.reasons  # the rest of the suite needs validated versions
    engine.dispose()
    return {"actors": actors, "v1": v1, "v2": v2, "info": info}


@pytest.fixture(scope="session")
def built(tmp_path_factory):
    base = tmp_path_factory.mktemp("lifecycle_base")
    db = base / "base.db"
    return {**build_registry(f"sqlite:///{db}", base), "path": db}


@pytest.fixture
def reg(built, tmp_path):
    path = tmp_path / "registry.db"
    copy_sqlite(built["path"], path)
    url = f"sqlite:///{path}"
    engine = make_engine(url)
    yield Reg(url=url, path=path, engine=engine, actors=dict(built["actors"]), v1=built["v1"],
              v2=built["v2"], tmp=tmp_path)
    engine.dispose()
    from registry.storage.engine import dispose_engines

    dispose_engines()
