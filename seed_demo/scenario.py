"""The demo scenario: fourteen invented months at two invented fuel labs.

Everything is made up: the sites, people, analyzers and fuels. The history is
written through the service layer with the registry clock set to each step's
date, so the audit chain, signatures and due dates are those a real registry
would hold after such a year:

* months 1–2: a calibration campaign on premium gasoline (density on every
  sample scanned, the costlier engine tests for RON and MON on two in three)
  and B7 diesel (cetane); first calibration sets and model versions, validated,
  approved with signatures and activated: RON and MON on both analyzers, density
  on the terminal's analyzer (the refinery lab measures density directly on its
  own density meter), cetane on the refinery's;
* months 3–9: routine production predicted by the active models, monthly QC
  on a control material, a winter-grade switch in month 6;
* month 7: a Kennard–Stone selection run within budget; its samples are
  engine-tested, a second calibration set and model versions follow and
  supersede the first;
* month 10: a new blend component (heavy aromatic reformate) enters most of
  the refinery's premium production, outside the calibration space: its
  predictions are flagged and coverage drift makes the RON and MON models due
  (the density model, used only at the terminal, never sees it);
* month 9: the lab puts four models of other families into service beside PLS
  (:data:`FAMILY_MODELS`): benzene from its 674 cm⁻¹ band and ethanol with MTBE by
  classical least squares on the terminal's analyzer, the anti-knock index
  (RON + MON)/2 computed from the active octane models' results, and a look-up of the
  most similar tested diesel samples for the distillation midpoint T50 at the
  refinery; each is validated, approved by the reviewer, deployed, used every month
  and traced by the auditor at the end;
* month 12: the second analyzer's QC drifts and signals;
* now: the density model is overdue under its 180-day policy.
"""

from __future__ import annotations

import shutil
import tempfile
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Callable

import numpy as np

from registry.clock import frozen_at
from registry.lifecycle.qc_charts import DEFAULT_BASELINE, qc_report
from registry.services import (admin, calibration, intake, lifecycle, models, predictions,
                               qc, references, revalidation, selection)
from registry.services.auth import actor_of
from registry.services.context import Actor
from registry.services.qc import MIN_RESULTS_FOR_SIGNALS
from registry.spectra.formats import write_csv_spectra
from registry.spectra.record import SpectrumRecord
from registry.storage.engine import session_scope
from registry.storage.models import Sample
from seed_demo.synthetic import Analyzer, generate_population, reference_noise, reference_sigma

MONTHS = 14
GASOLINE_GRADE = "PREM95"
DIESEL_GRADE = "B7"

#: Demo-only logins (printed once by ``specledger demo``). Never use them elsewhere.
PEOPLE = [
    # user, full name, roles, password
    ("rowan", "Rowan Hale", ["admin"], "demo-rowan-2026"),
    ("imara", "Imara Quist", ["lab_manager"], "demo-imara-2026"),
    ("teodor", "Teodor Lind", ["analyst"], "demo-teodor-2026"),
    ("sana", "Sana Okafor", ["analyst"], "demo-sana-2026"),
    ("greta", "Greta Morwen", ["reviewer"], "demo-greta-2026"),
    ("jonas", "Jonas Brede", ["auditor"], "demo-jonas-2026"),
]

SITES = [("Kestrel Bay Terminal", "Europe/Oslo"), ("Alder Ridge Refinery Lab", "America/Chicago")]

#: Both analyzers co-add scans and hold their cells at a set temperature (invented figures):
#: white noise 5·10⁻⁵ absorbance, and a 0.1 % multiplicative term, about what ±1 K does to
#: absorbance through the liquid's density (gasoline expands by about 0.1 %/K; from memory).
_CELL = dict(noise_sd=5e-5, multiplicative_sd=1e-3)
#: Two analyzers that differ slightly (band shift, line width, path length).
ANALYZERS = {
    "KB-IR-01": (SITES[0][0], Analyzer("KB-IR-01", pathlength_um=50.0, **_CELL)),
    "AR-IR-02": (SITES[1][0], Analyzer("AR-IR-02", pathlength_um=50.5, shift_cm=0.15,
                                       resolution_cm=4.3, **_CELL)),
}
GASOLINE_PROPERTIES = {"RON": "ASTM D2699", "MON": "ASTM D2700", "DENSITY": "ASTM D4052"}
ENGINE_PROPERTIES = {k: GASOLINE_PROPERTIES[k] for k in ("RON", "MON")}
DIESEL_PROPERTIES = {"CN": "ASTM D613"}
#: Where each model is used. The refinery lab (AR-IR-02) measures density directly on its
#: density meter; the terminal (KB-IR-01) predicts it. Diesel is analysed at the refinery.
DEPLOYED_ON = {"RON": ("KB-IR-01", "AR-IR-02"), "MON": ("KB-IR-01", "AR-IR-02"),
               "DENSITY": ("KB-IR-01",), "CN": ("AR-IR-02",),
               "BENZENE": ("KB-IR-01",), "ETHANOL": ("KB-IR-01",), "AKI": ("KB-IR-01",),
               "T50": ("AR-IR-02",)}
#: The calibration campaign (months 1–2): premium samples scanned per analyzer and month, all
#: tested for density; the first ENGINE_TESTED of each batch (a random subset: a batch comes
#: in random order) also go to the knock engines. Diesel samples scanned per month at the
#: refinery, all cetane-tested. Sizes are invented: large enough that reference-method
#: scatter, not sampling luck, decides the validation statistics.
CAMPAIGN_SCANS, ENGINE_TESTED, DIESEL_SCANS = 150, 100, 100
#: From month 10 the refinery blends the new component into this share of its premium
#: batches, at this volume fraction.
NEW_COMPONENT_BATCHES, NEW_COMPONENT_SHARE = 0.6, 0.12
QC_MATERIAL = "CONTROL-PREM-A"  # a retained premium gasoline used as control material
QC_VALUE, QC_SD = 95.3, 0.12  # its RON and the analyzers' day-to-day scatter on it (invented)
GENERATION_2_MONTH = 8
#: Who runs each reference test (the CSV's operator column); engine ratings otherwise.
BENCHES = {"DENSITY": "density-meter", "BENZENE": "gc-bench", "ETHANOL": "gc-bench",
           "MTBE": "gc-bench", "T50": "distillation-bench"}
#: Concentrations by chromatography: an absent component is reported as zero.
ABSENT_IS_ZERO = ("BENZENE", "ETHANOL", "MTBE")
#: The other families' primary methods (registry.catalog).
FAMILY_METHODS = {"BENZENE": "ASTM D5769", "ETHANOL": "ASTM D4815", "MTBE": "ASTM D4815",
                  "T50": "ASTM D86"}


@dataclass(frozen=True)
class FamilyModel:
    """One model of a family other than PLS in the story (month :data:`FAMILY_MONTH`)."""

    prop: str
    grade: str
    family: str
    options: dict
    purpose: str
    #: "duplex" (Duplex on PCA scores, a quarter held out) or "routine" (every fourth
    #: tested sample in order of testing held out)
    holdout: str = "duplex"


#: When the other families go into service (after the second PLS generation, so the
#: derived AKI starts from the octane models then current).
FAMILY_MONTH = 9
#: The lab's models beyond PLS. Band, CLS and look-up read one analyzer's spectra (the
#: calibration samples were scanned on it): a band height or a K matrix does not carry
#: over to another analyzer's line width. Options are those of registry.services.trainers.
FAMILY_MODELS = (
    # benzene's ring wag at 674 cm⁻¹ stands apart in gasoline (ASTM D6277 reads benzene
    # from it, from memory): its height above a baseline through 668 and 680 cm⁻¹
    FamilyModel("BENZENE", GASOLINE_GRADE, "band", {"band": [668, 680], "measure": "height"},
                "benzene from its 674 cm⁻¹ band"),
    # ethanol and MTBE overlap in the C–O region (ethanol 1048/1087, MTBE 1203/1085
    # cm⁻¹); K estimated from the tested mixtures, a sloping baseline term for the
    # hydrocarbons' weak absorbance there, a 99 % residual limit
    FamilyModel("ETHANOL", GASOLINE_GRADE, "cls",
                {"components": ["ETHANOL", "MTBE"], "baseline": "linear", "confidence": 0.99,
                 "recipe": [{"step": "region", "keep": [[1000, 1250]]}]},
                "ethanol with MTBE by classical least squares"),
    FamilyModel("AKI", GASOLINE_GRADE, "derived", {"formula": "(RON + MON) / 2"},
                "anti-knock index computed from the octane models' results"),
    # the midpoint of the distillation looked up as the mean of the ten most similar
    # tested samples (PCA scores of the preprocessed spectra, each direction scaled to
    # unit variance). A look-up answers for samples like the tested ones and cannot
    # extrapolate, so it is judged on routine samples (every fourth tested one), not on
    # the edges of the space a Duplex split sends to validation
    FamilyModel("T50", DIESEL_GRADE, "neighbours",
                {"n_neighbors": 10, "space": "scores", "weights": "uniform",
                 # in scaled-score units; the default, the largest nearest-neighbour
                 # distance inside the set (about 1 here), leaves routine samples without
                 # a value; 1.5 is the lab's own choice (invented)
                 "distance_limit": 1.5},
                "diesel T50 from the most similar tested samples", holdout="routine"),
)


@dataclass
class DemoReport:
    """What the demo built, for the command's summary."""

    seed: int
    counts: dict = field(default_factory=dict)
    models: list = field(default_factory=list)
    due: list = field(default_factory=list)
    logins: list = field(default_factory=lambda: [(u, r[0], p) for u, _, r, p in PEOPLE])
    notes: list = field(default_factory=list)
    start: datetime | None = None
    new_component_samples: list = field(default_factory=list)
    traces: dict = field(default_factory=dict)


def _quiet(values: np.ndarray) -> bool:
    """True when no result of a QC chart would signal as it is added (the QC service's rule:
    signals count from the MIN_RESULTS_FOR_SIGNALS-th result, at the newly added point)."""
    for k in range(MIN_RESULTS_FOR_SIGNALS, len(values) + 1):
        if any(s.index == k - 1 for s in qc_report(values[:k], baseline=DEFAULT_BASELINE).signals):
            return False
    return True


def _validation_samples(session, calset_name: str) -> list[str]:
    """External ids of a calibration set's validation members."""
    cs = calibration.get_calset(session, calset_name)
    return [session.get(Sample, m.sample_id).external_id
            for m in calibration.members_of(session, cs, "val")]


class _Builder:
    def __init__(self, engine, seed: int, workdir: Path, now: datetime,
                 progress: Callable[[str], None] | None, months: int = MONTHS):
        self.engine = engine
        self.months = months
        self.seed = seed
        self.rng = np.random.default_rng(seed)
        self.meta_rng = np.random.default_rng(seed + 1)  # batch/tank labels; keeps self.rng's stream
        # reference scatter of the tests for the other families (month 9): its own stream, so
        # the rest of the story draws what it drew before that chapter was written
        self.family_rng = np.random.default_rng([seed, 9])
        self.reported: dict[tuple[str, str], float] = {}  # (sample id, code) -> reported value
        self.work = workdir
        self.start = (now - timedelta(days=int(MONTHS * 30.4))).replace(
            hour=8, minute=0, second=0, microsecond=0)
        self.actors: dict[str, Actor] = {}
        self.passwords = {u: p for u, _, _, p in PEOPLE}
        self.true: dict[str, dict[str, float]] = {}  # sample id -> true properties
        self.serial = 0
        self.say = progress or (lambda _msg: None)
        self.report = DemoReport(seed=seed, start=self.start)

    # ------------------------------------------------------------------ helpers
    def at(self, month: float, day: float = 0.0, hour: float = 0.0) -> datetime:
        return self.start + timedelta(days=(month - 1) * 30.4 + day, hours=hour)

    def act(self, when: datetime, fn, *args, **kwargs):
        """One user action: its own transaction, at the replayed time."""
        with frozen_at(when), session_scope(self.engine) as session:
            return fn(session, *args, **kwargs)

    def next_seed(self) -> int:
        return int(self.rng.integers(0, 2**31 - 1))

    # ------------------------------------------------------------------ set-up
    def setup(self) -> None:
        when = self.at(1)
        with frozen_at(when), session_scope(self.engine) as s:
            admin.seed_catalog(s)
            root_name, full, roles, pw = PEOPLE[0]
            root = actor_of(admin.add_user(s, None, root_name, roles, pw, full_name=full))
            self.actors[root_name] = root
            for name, full, roles, pw in PEOPLE[1:]:
                self.actors[name] = actor_of(admin.add_user(s, root, name, roles, pw, full_name=full))
            for site, tz in SITES:
                admin.add_site(s, root, site, timezone=tz)
            for serial, (site, _) in ANALYZERS.items():
                admin.add_instrument(s, root, serial, site=site, spectral_range="4000-650",
                                     resolution=4.0, pathlength_um=50.0,
                                     description="FTIR analyzer, transmission cell")
            admin.add_grade(s, root, GASOLINE_GRADE, name="Premium gasoline 95, E0/E10",
                            family="gasoline")
            admin.add_grade(s, root, DIESEL_GRADE, name="Diesel with up to 7 % FAME", family="diesel")
            revalidation.set_policy(s, root, "DENSITY", GASOLINE_GRADE, 180)
            # Few diesel spectra a month: a single odd batch should not trip the drift rule.
            revalidation.set_policy(s, root, "CN", DIESEL_GRADE, 365, coverage_window_days=60,
                                    coverage_threshold=0.3)

    # ------------------------------------------------------------------ data
    def spectra_batch(self, month: float, serial: str, family: str, n: int, *,
                      season: str | None = None, new_share: float = 0.0,
                      new_fraction: float = 0.0, tag: str = "P") -> list[str]:
        """Generate, write and import ``n`` spectra measured in ``month`` on ``serial``."""
        site, analyzer = ANALYZERS[serial]
        grade = GASOLINE_GRADE if family == "gasoline" else DIESEL_GRADE
        kw = dict(family=family, seed=self.next_seed(), analyzer=analyzer)
        if family == "gasoline":
            kw.update(grade="premium", season=season)
        n_new = int(round(n * new_fraction))
        pops = [generate_population(n - n_new, **kw)] if n - n_new else []
        if n_new:
            kw["seed"] = self.next_seed()
            pops.append(generate_population(n_new, new_component_share=new_share, **kw))
        records, ids = [], []
        for k, pop in enumerate(pops):
            is_new = n_new > 0 and k == len(pops) - 1
            for i in range(pop.spectra.shape[0]):
                self.serial += 1
                sid = f"{serial[:2]}-{tag}{self.serial:05d}"
                day = float(self.rng.uniform(0, 28))
                when = self.at(month, day)
                tank = int(self.meta_rng.integers(1, 9))
                records.append(SpectrumRecord(sid, pop.axis, pop.spectra[i].astype(np.float32),
                                              metadata={"grade": grade, "operator": "shift-crew",
                                                        "acquired_at": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
                                                        "batch": f"{serial[:2]}{when:%y%m%d}-T{tank}",
                                                        "source": f"tank {tank}"}))
                self.true[sid] = {c: float(v) for c, v in pop.properties.iloc[i].items()}
                ids.append(sid)
                if is_new:
                    self.report.new_component_samples.append(sid)
        path = self.work / f"m{month:04.1f}-{serial}-{tag}-{self.serial:05d}.csv"
        write_csv_spectra(records, path, metadata_fields=["grade", "operator", "acquired_at",
                                                          "batch", "source"])
        analyst = self.actors["teodor" if serial == "KB-IR-01" else "sana"]
        self.act(self.at(month, 28), intake.import_spectra, analyst, [path], instrument=serial)
        return ids

    def reference_results(self, month: float, ids: list[str], props: dict[str, str],
                          lab: str = SITES[1][0], rng: np.random.Generator | None = None
                          ) -> None:
        """Primary-method results from the refinery lab's engines and density meter.

        Invented scatter: the bench's intermediate precision (ISO 5725-3: one laboratory,
        different days, operators and requalifications) is set halfway between repeatability
        and reproducibility in variance, σ_I² = (σ_r² + σ_R²)/2, with σ = r/2.77 and R/2.77
        (ISO 5725-6; ASTM E177). Results scattered with the full σ_R would leave no model able
        to reach SEP ≤ σ_R, which a lab testing on its own bench does reach.
        """
        rng = rng or self.rng
        lines = ["sample_id,property,method,value,unit,lab,tested_at,operator"]
        when = self.at(month, 29)
        for code, method in props.items():
            truth = np.array([self.true[i][code] for i in ids])
            noisy = reference_noise(code, truth, rng)  # repeatability part, σ_r
            extra = np.sqrt(np.maximum(reference_sigma(code, truth, between_labs=True) ** 2
                                       - reference_sigma(code, truth) ** 2, 0.0) / 2.0)
            noisy = noisy + extra * rng.standard_normal(truth.shape)
            if code in ABSENT_IS_ZERO:
                # a component the blend does not contain gives no chromatographic peak and
                # is reported as 0; no result of a present one is below zero
                noisy = np.where(truth > 0, np.maximum(noisy, 0.0), 0.0)
            unit = "g/mL" if code == "DENSITY" else ""
            digits = 4 if code == "DENSITY" else 2 if code == "BENZENE" else 1
            bench = BENCHES.get(code, "engine-bench")
            for sid, v in zip(ids, noisy):
                text = f"{v:.{digits}f}"
                self.reported[(sid, code)] = float(text)
                lines.append(f"{sid},{code},{method},{text},{unit},{lab},"
                             f"{when.strftime('%Y-%m-%dT%H:%MZ')},{bench}")
        path = self.work / f"ref-m{month:04.1f}-{len(ids)}-{'-'.join(props)}.csv"
        path.write_text("\n".join(lines) + "\n")
        self.act(when + timedelta(hours=2), references.import_references, self.actors["teodor"], path)

    # ------------------------------------------------------------------ models
    def model_generation(self, month: float, prop: str, grade: str, generation: int,
                         parent: str | None) -> str:
        """Calibration set, model version, validation, approval and deployment of one generation.

        Generation 1 splits its samples by Duplex; a later generation keeps the first one's
        validation samples, so the reviewer judges both versions on the same samples, and
        every newly tested sample (picked to widen the calibration) goes into calibration.
        """
        name = f"{prop}-{grade}-G{generation}"
        mgr = self.actors["imara"]
        split = ({"validation": "duplex:0.25"} if generation == 1 else
                 {"validation_external_ids": self.act(self.at(month, 2), _validation_samples,
                                                      f"{prop}-{grade}-G1")})
        self.act(self.at(month, 2), calibration.create_calibration_set, mgr, name,
                 property_code=prop, grade_code=grade, all_referenced=True,
                 description=f"generation {generation} for {prop}", **split)
        return self.release(month, name, prop, parent=parent, max_components=15)

    def release(self, month: float, calset: str, prop: str, **train) -> str:
        """Train on a frozen set (the analyst), validate and approve (the reviewer, who is
        not the author), deploy (the lab manager) on the analyzers of :data:`DEPLOYED_ON`."""
        mgr, author, reviewer = self.actors["imara"], self.actors["teodor"], self.actors["greta"]
        label = self.act(self.at(month, 3), models.train_model_version, author, calset,
                         **train).label
        rec = self.act(self.at(month, 4), models.validate_model, reviewer, label)
        if not rec.passed:
            self.report.notes.append(f"{label} failed validation: {'; '.join(rec.reasons)}")
            return label
        self.act(self.at(month, 5), lifecycle.submit_model, author, label,
                 reason="calibration and validation complete")
        self.act(self.at(month, 7), lifecycle.approve_model, reviewer, label,
                 password=self.passwords["greta"],
                 reason="validation statistics within acceptance criteria")
        for k, serial in enumerate(DEPLOYED_ON[prop]):
            self.act(self.at(month, 8, hour=k), lifecycle.activate_model, mgr, label,
                     instrument=serial, password=self.passwords["imara"],
                     reason="deployment after approval")
        return label

    def family_models(self, month: float, gasoline: list[str], engine: list[str],
                      diesel: list[str], validation_of: str) -> dict[str, str]:
        """The models beyond PLS (:data:`FAMILY_MODELS`): reference tests for their
        properties, one calibration set each, then the same release as every version.

        ``gasoline`` are the terminal's tested campaign samples, ``engine`` every
        engine-rated sample (their AKI is computed from the reported RON and MON, as a
        lab reports it), ``diesel`` the refinery's diesel campaign; the AKI set keeps
        the validation samples of ``validation_of`` so the derived property is judged on
        samples no octane model was trained on.
        """
        props = {"BENZENE", "ETHANOL", "MTBE"}
        self.reference_results(month - 1, gasoline, {c: FAMILY_METHODS[c] for c in sorted(props)},
                               rng=self.family_rng)
        self.reference_results(month - 1, diesel, {"T50": FAMILY_METHODS["T50"]},
                               rng=self.family_rng)
        self.aki_results(month - 1, engine)
        mgr, labels = self.actors["imara"], {}
        tested = {"BENZENE": gasoline, "ETHANOL": gasoline, "T50": diesel}
        for spec in FAMILY_MODELS:
            name = f"{spec.prop}-{spec.grade}-{spec.family.upper()}1"
            if spec.family == "derived":
                split = {"validation_external_ids": self.act(self.at(month, 2),
                                                             _validation_samples, validation_of)}
            elif spec.holdout == "routine":
                split = {"validation_external_ids": tested[spec.prop][3::4]}
            else:
                split = {"validation": "duplex:0.25"}
            self.act(self.at(month, 2), calibration.create_calibration_set, mgr, name,
                     property_code=spec.prop, grade_code=spec.grade, all_referenced=True,
                     description=spec.purpose, **split)
            labels[spec.prop] = self.release(month, name, spec.prop, family=spec.family,
                                             options=spec.options)
        return labels

    def aki_results(self, month: float, ids: list[str]) -> None:
        """AKI = (RON + MON)/2 of each engine-rated sample from its reported ratings (ASTM
        D4814, from memory): computed by the lab, imported like any result."""
        when = self.at(month, 29, hour=1)
        lines = ["sample_id,property,method,value,unit,lab,tested_at,operator"]
        for sid in ids:
            ron, mon = self.reported.get((sid, "RON")), self.reported.get((sid, "MON"))
            if ron is not None and mon is not None:
                lines.append(f"{sid},AKI,ASTM D4814,{(ron + mon) / 2:.2f},,{SITES[1][0]},"
                             f"{when.strftime('%Y-%m-%dT%H:%MZ')},computed")
        path = self.work / f"ref-m{month:04.1f}-AKI.csv"
        path.write_text("\n".join(lines) + "\n")
        self.act(when + timedelta(hours=2), references.import_references, self.actors["teodor"],
                 path)

    def trace_families(self, labels: dict[str, str]) -> None:
        """The auditor traces the latest result of each family's model (read-only)."""
        from registry.services import audit as audit_service
        from registry.storage.models import ModelVersion, Prediction
        from sqlmodel import select

        with session_scope(self.engine) as s:
            for label in labels.values():
                pid = s.exec(select(Prediction.id).join(
                    ModelVersion, ModelVersion.id == Prediction.model_version_id)
                    .where(ModelVersion.label == label)
                    .order_by(Prediction.id.desc())).first()
                if pid is not None:
                    doc = audit_service.trace(s, self.actors["jonas"], prediction_id=pid)
                    self.report.traces[label] = {"prediction_id": pid,
                                                 "family": doc["model"]["family"]}

    def predict_month(self, month: float, ids_by_serial: dict[str, list[str]],
                      labels: dict[str, str]) -> None:
        """The analyst predicts every production spectrum of the month with the active models."""
        when = self.at(month, 28, hour=6)
        spec = {serial: self.act(when, intake.spectra_of_samples,
                                 self.actors["teodor" if serial == "KB-IR-01" else "sana"], ids)
                for serial, ids in ids_by_serial.items()}
        for serial, spectrum_ids in spec.items():
            analyst = self.actors["teodor" if serial == "KB-IR-01" else "sana"]
            for prop, label in labels.items():
                if spectrum_ids and serial in DEPLOYED_ON[prop]:
                    self.act(self.at(month, 28, hour=6), predictions.predict, analyst, label,
                             spectrum_ids=spectrum_ids)

    def qc_times(self) -> list[datetime]:
        """When the weekly QC runs of months 3 to the end take place."""
        return [self.at(m, 3 + 7 * week, hour=7) for m in range(3, self.months + 1)
                for week in range(4)]

    def quiet_qc_scatter(self, serial: str) -> dict[datetime, float]:
        """An in-control analyzer's QC scatter around the control material's value.

        The run rules raise chance signals on an in-control chart now and then (each rule
        has a false-alarm rate); the story's analyzers are in control until AR-IR-02 drifts
        in month 12, so the scatter is drawn (from its own seeded stream) until no result
        would signal as it is added. Results are charted per active model version, so each
        version's stretch is checked on its own, with the service's rules.
        """
        rng = np.random.default_rng([self.seed, list(ANALYZERS).index(serial)])
        times = self.qc_times()
        switch = self.at(GENERATION_2_MONTH, 8)  # generation 2 goes live on day 8
        split = sum(t < switch for t in times)
        while True:
            scatter = np.round(QC_SD * rng.standard_normal(len(times)), 2)
            if all(_quiet(QC_VALUE + part) for part in (scatter[:split], scatter[split:])):
                return dict(zip(times, scatter.tolist()))

    def qc_month(self, month: float, drift: float = 0.0) -> None:
        """Four QC runs per analyzer: the control material's RON as predicted on the day."""
        for serial in ANALYZERS:
            shift = drift if serial == "AR-IR-02" else 0.0
            for week in range(4):
                when = self.at(month, 3 + 7 * week, hour=7)
                # Late in the month the drift has fully developed.
                value = QC_VALUE + self.qc_scatter[serial][when] + shift * (week + 1) / 4
                self.act(when, qc.add_qc_result,
                         self.actors["teodor" if serial == "KB-IR-01" else "sana"],
                         instrument=serial, material=QC_MATERIAL, value=round(value, 2),
                         known_value=QC_VALUE if (month == 3 and week == 0) else None,
                         property_code="RON", grade_code=GASOLINE_GRADE)

    # ------------------------------------------------------------------ story
    def run(self) -> DemoReport:
        self.say("setting up sites, analyzers, people and policies")
        self.setup()
        self.qc_scatter = {serial: self.quiet_qc_scatter(serial) for serial in ANALYZERS}
        self.say("months 1-2: calibration campaign")
        cal_g, engine, cal_d = [], [], []
        for m, season in ((1, "summer"), (2, "winter")):
            for serial in ANALYZERS:
                batch = self.spectra_batch(m, serial, "gasoline", CAMPAIGN_SCANS, season=season,
                                           tag="C")
                cal_g += batch
                engine += batch[:ENGINE_TESTED]
            cal_d += self.spectra_batch(m, "AR-IR-02", "diesel", DIESEL_SCANS, tag="D")
        self.reference_results(2, cal_g, {"DENSITY": GASOLINE_PROPERTIES["DENSITY"]})
        self.reference_results(2, engine, ENGINE_PROPERTIES)
        self.reference_results(2, cal_d, DIESEL_PROPERTIES)
        labels = {}
        for prop in GASOLINE_PROPERTIES:
            labels[prop] = self.model_generation(2.5, prop, GASOLINE_GRADE, 1, None)
        diesel_label = self.model_generation(2.5, "CN", DIESEL_GRADE, 1, None)

        pool: list[str] = []
        diesel_labels: dict[str, str] = {}
        diesel_pool = list(cal_d)
        for m in range(3, self.months + 1):
            self.say(f"month {m}: production, predictions and QC")
            season = "summer" if m < 6 or m > 12 else "winter"
            batch = {}
            for serial in ANALYZERS:
                refinery_new = m >= 10 and serial == "AR-IR-02"
                batch[serial] = self.spectra_batch(
                    m, serial, "gasoline", 62, season=season, new_share=NEW_COMPONENT_SHARE,
                    new_fraction=NEW_COMPONENT_BATCHES if refinery_new else 0.0)
            pool += batch["KB-IR-01"] + batch["AR-IR-02"]
            diesel_ids = self.spectra_batch(m, "AR-IR-02", "diesel", 18, tag="D")
            diesel_pool += diesel_ids
            if m == 3:
                self.qc_month(m)
            else:
                self.qc_month(m, drift=1.2 if m >= 12 else 0.0)
            self.predict_month(m, batch, labels)
            diesel_labels["CN"] = diesel_label
            self.predict_month(m, {"AR-IR-02": diesel_ids}, diesel_labels)
            if m == 7:
                self.say("month 7: selection run, engine tests, second model generation")
                run = self.act(self.at(7, 10), selection.run_selection, self.actors["imara"],
                               property_codes=["RON", "MON"], grade=GASOLINE_GRADE,
                               method="kennard-stone", budget=6000.0,
                               # production only: retained campaign samples have aged
                               since=self.at(3))
                picked = [p["sample_id"] for p in run.rows]
                self.reference_results(7.5, picked, GASOLINE_PROPERTIES)
                extra = [i for i in pool if i not in set(picked)][::9][:30]
                self.reference_results(7.5, extra, GASOLINE_PROPERTIES)
                self.reference_results(7.5, diesel_ids, DIESEL_PROPERTIES)
                for prop in GASOLINE_PROPERTIES:
                    labels[prop] = self.model_generation(GENERATION_2_MONTH, prop, GASOLINE_GRADE,
                                                         2, labels[prop])
                diesel_label = self.model_generation(GENERATION_2_MONTH, "CN", DIESEL_GRADE, 2,
                                                     diesel_label)
            if m == FAMILY_MONTH - 1:
                self.say(f"month {FAMILY_MONTH}: band, CLS, derived and look-up models")
                family = self.family_models(
                    FAMILY_MONTH, [i for i in cal_g if i.startswith("KB")],
                    [i for i in cal_g + pool if (i, "RON") in self.reported], diesel_pool,
                    validation_of=f"RON-{GASOLINE_GRADE}-G1")
                diesel_labels["T50"] = family.pop("T50")
                labels.update(family)
        self.report.models = list(labels.values()) + list(diesel_labels.values())
        self.trace_families({**{p: labels[p] for p in ("BENZENE", "ETHANOL", "AKI")
                                if p in labels}, **{p: diesel_labels[p] for p in ("T50",)
                                                    if p in diesel_labels}})
        return self.report


def build_demo(engine, *, seed: int = 7, now: datetime | None = None,
               progress: Callable[[str], None] | None = None, months: int = MONTHS) -> DemoReport:
    """Write the demo history into an empty, migrated registry.

    ``now`` anchors the end of the timeline (default: today), ``months`` stops the
    story early (tests use a short story; the timeline keeps its 14-month start).
    """
    if not 2 <= months <= MONTHS:
        raise ValueError(f"months must be between 2 and {MONTHS}")
    now = now or datetime.now(timezone.utc)
    work = Path(tempfile.mkdtemp(prefix="specledger-demo-"))
    try:
        builder = _Builder(engine, seed, work, now, progress, months)
        report = builder.run()
    finally:
        shutil.rmtree(work, ignore_errors=True)
    from registry.services.status import registry_status
    from registry.storage.models import RegistryMeta

    with session_scope(engine) as s:
        s.add(RegistryMeta(key="demo_seed", value=str(seed)))
        s.add(RegistryMeta(key="demo_built_for", value=now.strftime("%Y-%m-%d")))
    with session_scope(engine) as s:
        report.counts = registry_status(s, str(engine.url))["counts"]
        due = revalidation.due_list(s, builder.actors["jonas"])
    report.due = due
    return report
