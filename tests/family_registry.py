"""A registry with calibration sets for every model family, built through the services.

Invented data from the synthetic fuel generator (seed_demo.synthetic): premium gasoline
only (one grade, the population a lab calibrates a grade's models on), scanned once on
IR-100, with reference results scattered by each method's repeatability (the generator's
``reference_noise``). The sets and the family options follow the demo's
(seed_demo.scenario.FAMILY_MODELS): benzene from its 674 cm⁻¹ band height over a
668/680 cm⁻¹ baseline, ethanol with MTBE by CLS with K from the mixtures, the anti-knock
index (RON + MON)/2 from PLS models of RON and MON, and T50 looked up as the mean of the
ten most similar tested samples in scaled PCA-score space, judged on routine samples
(every fourth one held out). Every version is judged by the default acceptance rule.

:func:`build_family_registry` builds the file once; callers copy it per test
(:func:`tests.factories.copy_sqlite`). :func:`release_every_family` trains one version
of each family and puts it into service, as the UI tests need.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from registry.chemometrics.family_names import ModelFamily
from registry.services import (admin, calibration, intake, models, predictions,
                               references)
from registry.storage.engine import make_engine, session_scope, upgrade
from registry.storage.models import Sample
from seed_demo.scenario import ANALYZERS
from seed_demo.synthetic import generate_population, reference_noise
from tests.conftest import populate_basics
from tests.factories import into_service, write_population_csv, write_reference_csv

#: Tested premium samples: a quarter held out leaves 40 validation samples, enough for the
#: size rule n ≥ max(20, 4·A) up to A = 10 PLS components.
N = 160
#: Tested B7 diesel samples for the T50 look-up; every fourth is held out (30).
N_DIESEL = 120
SEED = 5
GRADE, DIESEL_GRADE = "PREM95", "B7"
#: The demo's terminal analyzer (co-added scans, a thermostatted cell).
ANALYZER = ANALYZERS["KB-IR-01"][1]
METHOD = {"RON": "ASTM D2699", "MON": "ASTM D2700", "BENZENE": "ASTM D5769",
          "ETHANOL": "ASTM D4815", "MTBE": "ASTM D4815", "T50": "ASTM D86",
          "AKI": "ASTM D4814"}
#: Chromatography reports an absent component as zero (seed_demo.scenario.ABSENT_IS_ZERO).
ABSENT_IS_ZERO = ("BENZENE", "ETHANOL", "MTBE")

#: Training options of each family (seed_demo.scenario.FAMILY_MODELS).
OPTIONS = {
    ModelFamily.BAND: ("BENZENE-A", {"band": [668, 680], "measure": "height"}),
    ModelFamily.CLS: ("ETHANOL-A", {"components": ["ETHANOL", "MTBE"], "baseline": "linear",
                                    "confidence": 0.99,
                                    "recipe": [{"step": "region", "keep": [[1000, 1250]]}]}),
    ModelFamily.NEIGHBOURS: ("T50-A", {"n_neighbors": 10, "space": "scores",
                                       "weights": "uniform", "distance_limit": 1.5}),
    ModelFamily.DERIVED: ("AKI-A", {"formula": "(RON + MON) / 2"}),
}
PLS_COMPONENTS = 8  # octane PLS models (A ≤ 10 by the size rule)


@dataclass
class FamilyRegistry:
    path: Path
    actors: dict
    population: object  # the premium gasoline, spectra 1..N
    diesel: object  # the B7 diesel, spectra N + 1..N + N_DIESEL
    labels: dict | None = None  # family → label, after release_every_family


def _import(engine, actors, root: Path, pop, prefix: str, grade: str, codes, rng) -> list[str]:
    """Spectra of ``pop`` and reference results of ``codes``; the sample ids."""
    ids = write_population_csv(root / f"{prefix}.csv", pop, prefix, grade)
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [root / f"{prefix}.csv"],
                              instrument="IR-100")
    reported = {}
    for code in codes:
        truth = pop.properties[code].to_numpy()
        values = reference_noise(code, truth, rng)
        if code in ABSENT_IS_ZERO:
            values = np.where(truth > 0, np.maximum(values, 0.0), 0.0)
        reported[code] = np.round(values, 3)  # as write_reference_csv writes them
    if "RON" in codes:
        # the anti-knock index is computed by the lab from the reported ratings (ASTM
        # D4814, from memory) and imported like any result
        reported["AKI"] = (reported["RON"] + reported["MON"]) / 2.0
    for code, values in reported.items():
        path = root / f"{prefix}-{code}.csv"
        write_reference_csv(path, ids, values, code, METHOD[code])
        with session_scope(engine) as s:
            references.import_references(s, actors["analyst"], path)
    return ids


def _freeze(engine, actors, code: str, grade: str, **split) -> None:
    with session_scope(engine) as s:
        calibration.create_calibration_set(s, actors["lab_manager"], f"{code}-A",
                                           property_code=code, grade_code=grade,
                                           all_referenced=True, **split)


def build_family_registry(root: Path, n: int = N, n_diesel: int = N_DIESEL,
                          seed: int = SEED) -> FamilyRegistry:
    """Spectra, reference results and one frozen calibration set per property."""
    url = f"sqlite:///{root / 'base.db'}"
    upgrade(url)
    engine = make_engine(url)
    actors = populate_basics(engine)
    with session_scope(engine) as s:
        admin.add_grade(s, actors["admin"], DIESEL_GRADE, name="Diesel B7", family="diesel")
    rng = np.random.default_rng(seed)
    gasoline = generate_population(n, family="gasoline", grade="premium", seed=seed,
                                   analyzer=ANALYZER)
    diesel = generate_population(n_diesel, family="diesel", grade=DIESEL_GRADE,
                                 seed=seed + 1, analyzer=ANALYZER)
    _import(engine, actors, root, gasoline, "F", GRADE,
            ("RON", "MON", "BENZENE", "ETHANOL", "MTBE"), rng)
    diesel_ids = _import(engine, actors, root, diesel, "D", DIESEL_GRADE, ("T50",), rng)
    for code in ("RON", "MON", "BENZENE", "ETHANOL"):
        _freeze(engine, actors, code, GRADE, validation="duplex:0.25")
    # a look-up answers for samples like the tested ones: judged on routine samples
    _freeze(engine, actors, "T50", DIESEL_GRADE, validation_external_ids=diesel_ids[3::4])
    # the derived property is judged on samples no octane model was trained on
    with session_scope(engine) as s:
        ron = calibration.get_calset(s, "RON-A")
        held_out = [s.get(Sample, m.sample_id).external_id
                    for m in calibration.members_of(s, ron, "val")]
    _freeze(engine, actors, "AKI", GRADE, validation_external_ids=held_out)
    engine.dispose()
    return FamilyRegistry(root / "base.db", actors, gasoline, diesel)


def train(engine, actors, calset, family, options=None, **kw) -> str:
    with session_scope(engine) as s:
        return models.train_model_version(s, actors["analyst"], calset, family=family,
                                          options=options, **kw).label


def build_every_family(root: Path) -> FamilyRegistry:
    """:func:`build_family_registry` with one version of each family in service."""
    reg = build_family_registry(root)
    engine = make_engine(f"sqlite:///{reg.path}")
    try:
        reg.labels = release_every_family(engine, reg.actors)
    finally:
        engine.dispose()
    return reg


def release_every_family(engine, actors) -> dict[ModelFamily, str]:
    """One version of each family in service (RON and MON by PLS feed the derived AKI),
    each used for a few predictions; labels by family (PLS: the RON version)."""
    labels = {}
    for code in ("RON", "MON"):
        label = train(engine, actors, f"{code}-A", ModelFamily.PLS, max_components=PLS_COMPONENTS)
        into_service(engine, actors, label)
        labels.setdefault(ModelFamily.PLS, label)
    for family in (ModelFamily.BAND, ModelFamily.CLS, ModelFamily.NEIGHBOURS,
                   ModelFamily.DERIVED):
        calset, options = OPTIONS[family]
        labels[family] = train(engine, actors, calset, family, options)
        into_service(engine, actors, labels[family])
    for family, label in labels.items():
        # the look-up is for diesel (imported after the N gasoline spectra)
        first = N + 1 if family == ModelFamily.NEIGHBOURS else 1
        with session_scope(engine) as s:
            predictions.predict(s, actors["analyst"], label,
                                spectrum_ids=list(range(first, first + 3)))
    return labels
