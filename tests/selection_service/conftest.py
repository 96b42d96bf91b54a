"""A registry with RON-referenced and untested gasoline spectra, plus a few blends with
a new component the calibration has never seen (invented demo data, seed_demo.synthetic).

The registry is built once per test module through the services and copied (SQLite
file) for each test, so every test starts from the same state and stays fast.
"""

from __future__ import annotations

import shutil

import pytest

from registry.services import intake
from registry.storage.engine import make_engine, session_scope, upgrade
from seed_demo.synthetic import generate_population
from tests.conftest import populate_basics
from tests.factories import referenced_registry, write_population_csv

N_REFERENCED = 60
N_UNREFERENCED = 200
N_NEW = 8


@pytest.fixture(scope="module")
def _template(tmp_path_factory):
    root = tmp_path_factory.mktemp("selection-registry")
    url = f"sqlite:///{root / 'registry.db'}"
    upgrade(url)
    engine = make_engine(url)
    actors = populate_basics(engine)
    info = referenced_registry(engine, actors, root, n=N_REFERENCED, n_unreferenced=N_UNREFERENCED)
    new = generate_population(N_NEW, family="gasoline", seed=11, new_component_share=0.1)
    path = root / "new_component.csv"
    info["new_component"] = write_population_csv(path, new, "N", "PREM95", start_day=20)
    info["new_population"] = new
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    engine.dispose()
    return root / "registry.db", actors, info


@pytest.fixture
def sel_registry(_template, tmp_path):
    """(engine, actors, info, url) on a private copy of the module's registry."""
    db_file, actors, info = _template
    copy = tmp_path / "registry.db"
    shutil.copyfile(db_file, copy)
    url = f"sqlite:///{copy}"
    engine = make_engine(url)
    yield engine, actors, info, url
    engine.dispose()


def write_results(path, ids, prop, method, values, unit=""):
    """A reference-results CSV in the registry's import layout."""
    lines = ["sample_id,property,method,value,unit,lab,tested_at"]
    lines += [f"{sid},{prop},{method},{v:.1f},{unit},Lab A,2027-03-01T10:00"
              for sid, v in zip(ids, values)]
    path.write_text("\n".join(lines) + "\n")
    return path


def ids_of(result) -> list[str]:
    return [r["sample_id"] for r in result.rows]
