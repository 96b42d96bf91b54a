"""Every model family through the same service path: train → validate → submit → approve
(another user) → activate → predict → trace → audit verify.

The registry (tests/family_registry.py) is built from the invented synthetic fuel
generator (seed_demo.synthetic) through the services: premium gasoline and B7 diesel, the
demo's family options, and every version judged by the default acceptance rule (SEP ≤
σ_R, no significant bias, n ≥ 20). These tests check registry behaviour (lifecycle,
lineage, hashes); tests/chemometrics/families checks the numbers against outside sources.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import numpy as np
import pytest
from sqlmodel import select

from registry.chemometrics.family_names import ModelFamily
from registry.errors import InputError
from registry.lineage.trace import load_schema
from registry.lineage.trace_render import render_text
from registry.services import audit as audit_svc
from registry.services import intake, models, predictions
from registry.services.revalidation import list_triggers
from registry.storage.engine import make_engine, session_scope
from registry.storage.models import ModelVersion, Prediction
from tests.conftest import PASSWORD
from tests.factories import copy_sqlite
from tests.family_registry import (N, N_DIESEL, OPTIONS, PLS_COMPONENTS, build_family_registry,
                                   into_service, train)

#: Tests on the registry: its build takes about 7 s on 2 cores.
slow = pytest.mark.slow


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """Built once per module, copied per test."""
    reg = build_family_registry(tmp_path_factory.mktemp("families"))
    return reg.path, reg.actors, reg.population


@pytest.fixture
def reg(built, tmp_path):
    src, actors, pop = built
    copy_sqlite(src, tmp_path / "r.db")
    engine = make_engine(f"sqlite:///{tmp_path / 'r.db'}")
    yield engine, actors, pop
    engine.dispose()


def predict_trace_verify(engine, actors, label, spectrum_ids=(1, 2, 3)):
    with session_scope(engine) as s:
        batch = predictions.predict(s, actors["analyst"], label, spectrum_ids=list(spectrum_ids))
    stored = [p for p in batch.predictions if p["id"] is not None]
    assert stored, "no prediction stored"
    with session_scope(engine) as s:
        doc = audit_svc.trace(s, actors["auditor"], prediction_id=stored[0]["id"])
        report = audit_svc.verify_registry(s, actors["auditor"])
    jsonschema = pytest.importorskip("jsonschema")
    jsonschema.validate(doc, load_schema())
    assert report.intact, report.problems
    assert report.checked.get("model_version", 0) >= 1
    assert doc["integrity"]["artifact_hash_ok"] and doc["integrity"]["signatures_match_content"]
    return batch, doc


SPECS = {family: OPTIONS[family] for family in
         (ModelFamily.BAND, ModelFamily.CLS, ModelFamily.NEIGHBOURS)}
#: Spectra each family predicts: the gasoline spectra are imported first, then the diesel.
GASOLINE_SPECTRA, DIESEL_SPECTRA = (1, 2, 3), (N + 1, N + 2, N + 3)


@slow
@pytest.mark.parametrize("family", list(SPECS))
def test_spectral_family_goes_through_the_whole_lifecycle(reg, family):
    engine, actors, pop = reg
    calset, options = SPECS[family]
    label = train(engine, actors, calset, family, options)
    into_service(engine, actors, label)
    spectra = DIESEL_SPECTRA if family == ModelFamily.NEIGHBOURS else GASOLINE_SPECTRA
    batch, doc = predict_trace_verify(engine, actors, label, spectra)
    assert doc["model"]["family"] == family.value
    assert doc["model"]["description"] == models.DESCRIPTIONS[family]
    with session_scope(engine) as s:
        rows = {r["label"]: r for r in models.list_models(s, actors["auditor"])}
        detail = models.model_detail(s, actors["auditor"], label)
    assert rows[label]["family"] == family and rows[label]["state"] == "active"
    assert detail["settings"] is not None
    for p in batch.predictions:
        assert "not_in_service" not in p["flags"]


@slow
def test_neighbour_lookup_says_it_is_not_a_model(reg):
    """The trace of a looked-up result says, in JSON, text and HTML, that it is a look-up
    of similar samples and names every version by its family."""
    from registry.lineage.trace_render import render_html

    engine, actors, _ = reg
    calset, options = SPECS[ModelFamily.NEIGHBOURS]
    label = train(engine, actors, calset, ModelFamily.NEIGHBOURS, options)
    into_service(engine, actors, label)
    batch, doc = predict_trace_verify(engine, actors, label, DIESEL_SPECTRA)
    statement = "look-up of similar samples, not a model"
    assert statement in doc["model"]["description"]
    text, page = render_text(doc), render_html(doc)
    assert text.splitlines()[0].endswith(f"by neighbours version {label}")
    assert f"neighbours: {statement}" in text
    assert f"Version {label} (neighbours)" in page and statement in page
    assert "none (this family stores no cross-validation curve)" in page
    assert f"model {label}" not in text and "by model" not in text
    with session_scope(engine) as s:
        sample = audit_svc.trace(s, actors["auditor"], sample=doc["sample"]["external_id"],
                                 property_code="T50")
    models_of_sets = [m for c in sample["sample_record"]["calibration_sets"] for m in c["models"]]
    assert models_of_sets and {m["family"] for m in models_of_sets} == {"neighbours"}
    assert f"{label} (neighbours, active)" in render_text(sample)


@slow
def test_lookup_without_a_value_fails_validation(reg):
    """A validation sample farther from every calibration sample than the look-up's limit
    gets no value; the record says so and does not pass (the statistics cover the rest)."""
    engine, actors, _ = reg
    # a limit of half a standard deviation in scaled-score space (the demo's is 1.5):
    # some routine samples have no tested sample that close
    label = train(engine, actors, "T50-A", ModelFamily.NEIGHBOURS,
                  {"n_neighbors": 3, "space": "scores", "distance_limit": 0.5})
    with session_scope(engine) as s:
        rec = models.validate_model(s, actors["reviewer"], label)
    without = rec.statistics["n_without_value"]
    assert 1 <= without < N_DIESEL // 4 and not rec.passed
    assert rec.n == N_DIESEL // 4 - without  # every fourth diesel sample is held out
    assert any("got no value" in r for r in rec.reasons)


@slow
def test_band_model_value_follows_the_band_calibration(reg):
    """The stored value is the artifact's own calibration of the band height (y = b0 +
    b1·v, v from band_values on the same spectrum): the service adds nothing of its own."""
    from registry.chemometrics.families import band_values
    from registry.chemometrics.fitted import load_fitted

    engine, actors, pop = reg
    label = train(engine, actors, "BENZENE-A", ModelFamily.BAND, SPECS[ModelFamily.BAND][1])
    with session_scope(engine) as s:
        batch = predictions.predict(s, actors["analyst"], label, spectrum_ids=[4])
        mv = s.exec(select(ModelVersion).where(ModelVersion.label == label)).one()
        est = load_fitted(mv.artifact, mv.artifact_sha256).estimator
    options = SPECS[ModelFamily.BAND][1]
    v = band_values(pop.spectra[3].astype(np.float32).astype(np.float64), pop.axis,
                    options["band"], measure=options["measure"])
    expected = est.coefficients_[0] + est.coefficients_[1] * v[0]
    assert batch.predictions[0]["value"] == pytest.approx(expected, rel=1e-9)


def octane_models_in_service(engine, actors) -> tuple[str, str]:
    out = []
    for code in ("RON", "MON"):
        label = train(engine, actors, f"{code}-A", ModelFamily.PLS, max_components=PLS_COMPONENTS)
        into_service(engine, actors, label)
        out.append(label)
    return out[0], out[1]


@slow
def test_derived_property_points_to_its_inputs_and_falls_due_when_one_changes(reg):
    engine, actors, pop = reg
    ron, mon = octane_models_in_service(engine, actors)
    calset, options = OPTIONS[ModelFamily.DERIVED]
    label = train(engine, actors, calset, ModelFamily.DERIVED, options)
    into_service(engine, actors, label)
    batch, doc = predict_trace_verify(engine, actors, label)
    p = doc["prediction"]
    assert set(p["diagnostics"]["inputs"]) == {"RON", "MON"}
    assert [(i["property"], i["model"]) for i in p["inputs"]] == [("MON", mon), ("RON", ron)]
    with session_scope(engine) as s:
        for code, link in p["diagnostics"]["inputs"].items():
            row = s.get(Prediction, link["prediction_id"])
            mv = s.get(ModelVersion, row.model_version_id)
            assert mv.label == link["model"] and row.value == link["value"]
            assert row.spectrum_id == doc["spectrum"]["id"]
    assert [i["family"] for i in p["inputs"]] == ["pls", "pls"]
    text = render_text(doc)
    assert f"by pls version {ron}" in text and f"by derived version {label}" in text
    inputs = {c: l["value"] for c, l in p["diagnostics"]["inputs"].items()}
    # AKI = (RON + MON)/2 (ASTM D4814, from memory)
    assert p["value"] == pytest.approx((inputs["RON"] + inputs["MON"]) / 2, rel=1e-12)
    # a new RON version in service makes the derived version due
    ron2 = train(engine, actors, "RON-A", ModelFamily.PLS, max_components=PLS_COMPONENTS + 1)
    into_service(engine, actors, ron2)
    with session_scope(engine) as s:
        open_kinds = {t["kind"] for t in list_triggers(s, actors["auditor"], label=label)}
    assert "input_change" in open_kinds
    # revalidating the derived version on the new input answers the trigger
    with session_scope(engine) as s:
        rec = models.validate_model(s, actors["reviewer"], label, kind="local")
    assert rec.passed, rec.reasons
    assert rec.statistics["inputs"]["RON"]["model"] == ron2
    with session_scope(engine) as s:
        assert not list_triggers(s, actors["auditor"], label=label)


@slow
def test_unknown_family_and_option_are_refused_before_anything_is_written(reg):
    engine, actors, _ = reg
    with pytest.raises(InputError) as err:
        train(engine, actors, "BENZENE-A", "spline", {})
    assert err.value.field == "--family"
    with pytest.raises(InputError) as err:
        train(engine, actors, "BENZENE-A", ModelFamily.BAND, {"band": [664, 684], "width": 3})
    assert err.value.field == "width"
    with session_scope(engine) as s:
        assert s.exec(select(ModelVersion)).all() == []


def test_services_do_not_branch_on_the_family():
    """Only the trainer table chooses code by family. The one comparison with a family
    name left in the services is load_trained's refusal of a non-PLS version where a PLS
    score space is asked for (selection and coverage views)."""
    import registry.services as pkg

    found = []
    for path in sorted(Path(pkg.__file__).parent.glob("*.py")):
        if path.name == "trainers.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, (ast.Compare, ast.Match)) and re.search(
                    r"\.family\b|ModelFamily", ast.unparse(node)):
                found.append((path.name, ast.unparse(node)))
    assert found == [("models.py", "mv.family != ModelFamily.PLS")]


@slow
def test_cli_trains_a_family_from_a_recipe_file_and_lists_the_family(reg, tmp_path):
    import json

    from typer.testing import CliRunner

    from registry.cli import app

    engine, actors, _ = reg
    env = {"SPECLEDGER_DATABASE_URL": str(engine.url), "SPECLEDGER_USER": "anton",
           "SPECLEDGER_PASSWORD": PASSWORD}
    runner = CliRunner()
    recipe = tmp_path / "band.json"
    recipe.write_text(json.dumps({"band": [664, 684], "measure": "height"}))
    res = runner.invoke(app, ["model", "train", "--calset", "BENZENE-A", "--family", "band",
                              "--recipe", str(recipe), "--format", "json"], env=env)
    assert res.exit_code == 0, res.output
    label = json.loads(res.stdout)["label"]
    res = runner.invoke(app, ["model", "train", "--calset", "BENZENE-A", "--family", "band",
                              "--recipe", str(recipe), "--max-components", "3"], env=env)
    assert res.exit_code != 0 and "--max-components" in res.output
    res = runner.invoke(app, ["model", "list", "--format", "json"], env=env)
    assert res.exit_code == 0, res.output
    assert [(r["label"], r["family"]) for r in json.loads(res.stdout)] == [(label, "band")]
    res = runner.invoke(app, ["predict", "--model", label, "--spectrum", "1"], env=env)
    assert res.exit_code == 0, res.output
    assert "F0000" in res.output and "not_in_service" in res.output  # a draft is not in service


@slow
def test_cls_takes_k_from_pure_component_spectra_imported_as_samples(reg, tmp_path):
    """K from a pure-component reference spectrum: the row of K is the imported spectrum
    (after the set's preprocessing) divided by the stated concentration — Beer–Lambert,
    absorbance proportional to concentration (Haaland & Easterling, Appl. Spectrosc.
    34:539, 1980) — and the version names the sample and spectra it came from."""
    from registry.chemometrics.fitted import load_fitted
    from registry.spectra.formats import write_csv_spectra
    from registry.spectra.record import SpectrumRecord
    from seed_demo.synthetic.spectra import pure_component_spectra

    engine, actors, pop = reg
    pure = (pure_component_spectra(["ethanol"], axis=pop.axis)[0] * 0.5).astype(np.float32)
    write_csv_spectra([SpectrumRecord("PURE-ETOH", pop.axis, pure)], tmp_path / "pure.csv")
    with session_scope(engine) as s:
        sid = intake.import_spectra(s, actors["analyst"], [tmp_path / "pure.csv"],
                                    instrument="IR-100").spectrum_ids[0]
    options = {"pure_spectra": {"ETHANOL": {"sample": "PURE-ETOH", "value": 100.0}},
               "baseline": "offset", "recipe": [{"step": "region", "keep": [[1000, 1120]]}]}
    label = train(engine, actors, "ETHANOL-A", ModelFamily.CLS, options)
    with session_scope(engine) as s:
        mv = s.exec(select(ModelVersion).where(ModelVersion.label == label)).one()
        fitted = load_fitted(mv.artifact, mv.artifact_sha256)
        doc = audit_svc.trace(s, actors["auditor"], model=label)
    kept = (pop.axis >= 1000) & (pop.axis <= 1120)
    np.testing.assert_allclose(fitted.estimator.K_[0], pure.astype(np.float64)[kept] / 100.0,
                               rtol=1e-12)
    lineage = doc["model"]["settings"]["pure_spectra"]["ETHANOL"]
    assert lineage == {"sample": "PURE-ETOH", "spectrum_ids": [sid], "value": 100.0}
    with pytest.raises(InputError, match="ETHANOL"):
        train(engine, actors, "ETHANOL-A", ModelFamily.CLS,
              {"pure_spectra": {"AROMATICS": {"sample": "PURE-ETOH", "value": 100.0}}})


@slow
def test_selection_and_coverage_refuse_a_property_whose_current_model_is_not_pls(reg):
    """Selection and the coverage map work in a PLS score space: when the current model of
    the property is a band calibration, both refuse with a message that names the
    property, its family and what to do (no silent fall-back to an older space)."""
    from registry.services import selection, views

    engine, actors, _ = reg
    label = train(engine, actors, "BENZENE-A", ModelFamily.BAND,
                  SPECS[ModelFamily.BAND][1])
    into_service(engine, actors, label)
    with session_scope(engine) as s:
        with pytest.raises(InputError) as err:
            selection.run_selection(s, actors["lab_manager"], property_codes=["BENZENE"],
                                    grade="PREM95", method="kennard-stone", n=5, store=False)
    for needed in ("BENZENE", "PREM95", label, "band", "Train a PLS version"):
        assert needed in str(err.value), needed
    with session_scope(engine) as s:
        with pytest.raises(InputError, match=r"BENZENE on PREM95 is .* a band model"):
            views.coverage_map(s, actors["auditor"], "BENZENE", "PREM95")
