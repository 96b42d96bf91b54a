"""A registry with referenced and untested gasoline spectra, plus a few blends that
contain a new component the calibration has never seen (invented demo data)."""

from __future__ import annotations

import numpy as np
import pytest

from registry.services import intake
from registry.storage.engine import session_scope
from seed_demo.synthetic import generate_population
from tests.factories import referenced_registry, write_population_csv

N_REFERENCED = 60
N_UNREFERENCED = 200
N_NEW = 8


@pytest.fixture
def selection_registry(registry, tmp_path):
    """(engine, actors, info): 60 RON-referenced, 200 untested, 8 untested new-component blends."""
    engine, actors = registry
    info = referenced_registry(engine, actors, tmp_path, n=N_REFERENCED,
                               n_unreferenced=N_UNREFERENCED)
    new = generate_population(N_NEW, family="gasoline", seed=11, new_component_share=0.1)
    path = tmp_path / "new_component.csv"
    new_ids = write_population_csv(path, new, "N", "PREM95", start_day=20)
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    info["new_component"] = new_ids
    info["new_population"] = new
    return engine, actors, info


def write_results(path, ids, prop, method, values, unit=""):
    lines = ["sample_id,property,method,value,unit,lab,tested_at"]
    lines += [f"{sid},{prop},{method},{v:.1f},{unit},Lab A,2027-03-01T10:00"
              for sid, v in zip(ids, values)]
    path.write_text("\n".join(lines) + "\n")
    return path


def ids_of(result) -> list[str]:
    return [r["sample_id"] for r in result.rows]


__all__ = ["N_NEW", "N_REFERENCED", "N_UNREFERENCED", "ids_of", "np", "write_results"]
