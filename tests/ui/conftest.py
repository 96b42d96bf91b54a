"""A registry with a model in service, predictions and QC results, built once per session.

Built through the services from the synthetic fuel generator (invented data; these
tests check what the front end shows, not numbers): 80 referenced and 40 unreferenced
gasoline spectra on IR-100, a calibration set frozen by the lab manager, one model
trained by the analyst, validated by the reviewer, submitted, approved and activated,
predictions of the unreferenced spectra, and 20 QC results of one control material.
Each test gets its own copy of the file.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from registry.services import predictions, qc
from registry.storage.engine import dispose_engines, make_engine, session_scope, upgrade
from tests.conftest import PASSWORD, ROLE_USERS, populate_basics
from tests.factories import (accept_small_test_models, copy_sqlite, into_service,
                             referenced_registry, trained_ron_version)

N_REFERENCED = 80
N_UNREFERENCED = 40
N_QC = 20


@dataclass
class UIRegistry:
    url: str
    path: Path
    actors: dict
    label: str
    prediction_ids: list[int]
    info: dict


def _build(base: Path) -> dict:
    db = base / "base.db"
    url = f"sqlite:///{db}"
    upgrade(url)
    engine = make_engine(url)
    actors = populate_basics(engine)
    info = referenced_registry(engine, actors, base, n=N_REFERENCED, n_unreferenced=N_UNREFERENCED)
    accept_small_test_models(engine, actors)
    label = trained_ron_version(engine, actors)
    into_service(engine, actors, label)
    ids = list(range(N_REFERENCED + 1, N_REFERENCED + N_UNREFERENCED + 1))
    with session_scope(engine) as s:
        batch = predictions.predict(s, actors["analyst"], label, spectrum_ids=ids)
        prediction_ids = [p["id"] for p in batch.predictions]
    rng = np.random.default_rng(11)
    values = 95.0 + rng.normal(0.0, 0.1, N_QC)
    for k, v in enumerate(values):
        with session_scope(engine) as s:
            qc.add_qc_result(s, actors["analyst"], instrument="IR-100", material="CHECK-95",
                             value=float(v), known_value=95.0, property_code="RON",
                             measured_at=f"2027-02-{k + 1:02d}T09:00")
    engine.dispose()
    return {"path": db, "actors": actors, "label": label, "prediction_ids": prediction_ids,
            "info": info}


@pytest.fixture(scope="session")
def ui_built(tmp_path_factory):
    return _build(tmp_path_factory.mktemp("ui_base"))


@pytest.fixture
def ui_reg(ui_built, tmp_path, monkeypatch):
    """A private copy of the built registry; SPECLEDGER_DATABASE_URL points at it."""
    path = tmp_path / "registry.db"
    copy_sqlite(ui_built["path"], path)
    url = f"sqlite:///{path}"
    monkeypatch.setenv("SPECLEDGER_DATABASE_URL", url)
    yield UIRegistry(url=url, path=path, actors=dict(ui_built["actors"]), label=ui_built["label"],
                     prediction_ids=list(ui_built["prediction_ids"]), info=ui_built["info"])
    dispose_engines()


__all__ = ["PASSWORD", "ROLE_USERS", "UIRegistry"]
