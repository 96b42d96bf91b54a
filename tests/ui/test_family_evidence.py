"""The models page shows each model family's own evidence, with the numbers the review
service gives (tests/services/test_family_evidence.py checks those numbers against numpy,
scikit-learn and the first-order uncertainty formula).

The registry holds one version of each family in service (tests/family_registry.py,
invented data from seed_demo.synthetic), built once per session.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from registry.chemometrics.family_names import ModelFamily
from registry.services import review
from registry.storage.engine import dispose_engines
from tests.factories import copy_sqlite
from tests.ui.helpers import array, open_page, service, signed_in, texts
from ui.format import num

pytestmark = pytest.mark.slow  # the shared registry takes about 17 s to build on 2 cores


class Registry:
    def __init__(self, url, actors, labels):
        self.url, self.actors, self.labels = url, actors, labels


@pytest.fixture
def fam(every_family_built, tmp_path, monkeypatch):
    path = tmp_path / "registry.db"
    copy_sqlite(every_family_built.path, path)
    url = f"sqlite:///{path}"
    monkeypatch.setenv("SPECLEDGER_DATABASE_URL", url)
    yield Registry(url, dict(every_family_built.actors), dict(every_family_built.labels))
    dispose_engines()


def page_on(label: str):
    at = open_page(signed_in("reviewer"), "models")
    at.selectbox(key="models_label").set_value(label).run()
    assert not at.exception, at.exception
    return at


def charts_in_order(at) -> list[dict]:
    return [json.loads(el.proto.spec) for el in at.get("plotly_chart")]


def charts(at) -> dict[str, dict]:
    """Plotly figures by title (figures without a title left out)."""
    out = {}
    for spec in charts_in_order(at):
        title = (spec.get("layout", {}).get("title") or {}).get("text")
        if title:
            out[title] = spec
    return out


def table(at, column: str):
    for df in at.dataframe:
        if column in df.value.columns:
            return df.value
    raise AssertionError(f"no table with a column {column!r}")


def value_of(df, row: str) -> str:
    return str(df.set_index(df.columns[0]).loc[row].iloc[0])


@pytest.mark.parametrize("family", list(ModelFamily))
def test_every_family_shows_validation_against_reference_and_the_verdict(fam, family):
    label = fam.labels[family]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    shown = texts(at)
    assert f"Family {family.value}: {ev['description']}" in shown
    assert "Predicted against reference" in shown
    pred = charts_in_order(at)[0]  # predicted against reference comes first
    traces = {t["name"]: t for t in pred["data"]}
    np.testing.assert_allclose(array(traces["validation set"]["y"]),
                               ev["validation_set"]["predicted"], rtol=1e-12)
    stats = next(df.value for df in at.dataframe if "verdict" in list(df.value.iloc[:, 0]))
    assert value_of(stats, "verdict") == "passed"
    assert value_of(stats, "σ_R = R/2.77") == num(ev["precision"]["sigma_R"])
    assert value_of(stats, "SEP") == num(ev["latest_validation"]["sep"])
    assert value_of(stats, "validation record").startswith(str(ev["latest_validation"]["id"]))


def test_band_shows_its_baseline_and_calibration_line(fam):
    label = fam.labels[ModelFamily.BAND]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    typical = ev["spectra"][0]
    sp = service(fam, review.spectrum_evidence, label, typical["spectrum_id"])
    figs = charts(at)
    line = figs["Calibration line: band height (668–680 cm⁻¹) against reference BENZENE"]
    points = next(t for t in line["data"] if t["name"] == "calibration samples")
    np.testing.assert_allclose(array(points["x"]), ev["family_evidence"]["calibration_values"])
    band = figs[f"Band region of {typical['sample']}: absorbance, baseline anchors and baseline"]
    traces = {t["name"]: t for t in band["data"]}
    np.testing.assert_allclose(array(traces["baseline"]["y"]), sp["baseline"], rtol=1e-12)
    np.testing.assert_allclose(array(traces["baseline anchors"]["x"]), [668.0, 680.0])
    fit = table(at, "calibration fit")
    assert "SEC (n − degree − 1 degrees of freedom)" in list(fit["calibration fit"])
    assert "A model result does not replace the specification test method" in texts(at)


def test_cls_shows_component_spectra_and_the_fit_of_a_spectrum(fam):
    label = fam.labels[ModelFamily.CLS]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    first_val = next(x for x in ev["spectra"] if x["kind"] == "validation")
    sp = service(fam, review.spectrum_evidence, label, first_val["spectrum_id"])
    figs = charts(at)
    k = figs["Component spectra (rows of K, estimated): absorbance of one concentration unit"]
    rows = {t["name"]: array(t["y"]) for t in k["data"]}
    assert list(rows) == ["ETHANOL", "MTBE"]
    np.testing.assert_allclose(rows["MTBE"], ev["family_evidence"]["K"][1], rtol=1e-12)
    fit = figs[f"{first_val['sample']}: measured spectrum, CLS fit and residual"]
    traces = {t["name"]: array(t["y"]) for t in fit["data"]}
    np.testing.assert_allclose(traces["residual"], sp["residual"], rtol=1e-12)
    result = table(at, "fit")
    assert value_of(result, "residual Q = ‖x − ĉK − b̂G‖²").endswith(
        f"(limit {num(sp['q_limit'])})")
    assert value_of(result, "condition number of K").startswith(num(sp["condition_number"]))


def test_derived_shows_its_inputs_versions_and_uncertainty(fam):
    label = fam.labels[ModelFamily.DERIVED]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    first_val = next(x for x in ev["spectra"] if x["kind"] == "validation")
    sp = service(fam, review.spectrum_evidence, label, first_val["spectrum_id"])
    assert "Formula: `AKI = (RON + MON) / 2`" in texts(at)
    inputs = table(at, "version used now")
    assert list(inputs["input"]) == ["MON", "RON"]
    assert inputs.set_index("input").loc["RON", "version used now"] == fam.labels[ModelFamily.PLS]
    assert f"propagated uncertainty u = {num(sp['uncertainty'])}" in texts(at)
    terms = table(at, "(∂f/∂x·SEP)²")
    assert list(terms["∂f/∂x"]) == [num(0.5), num(0.5)]


def test_lookup_says_it_is_not_a_model_and_lists_the_neighbours(fam):
    label = fam.labels[ModelFamily.NEIGHBOURS]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    first_val = next(x for x in ev["spectra"] if x["kind"] == "validation")
    sp = service(fam, review.spectrum_evidence, label, first_val["spectrum_id"])
    shown = texts(at)
    assert "This is a look-up of similar tested samples, not a model" in shown
    neighbours = table(at, "neighbour sample")
    assert list(neighbours["neighbour sample"]) == sp["samples"]
    assert list(neighbours["distance"]) == [num(d) for d in sp["neighbour_distance"]]
    assert f"against the limit {num(sp['distance_limit'])}" in shown
    assert f"(max − min) {num(sp['spread'])}" in shown


def test_pls_keeps_its_cross_validation_curve(fam):
    label = fam.labels[ModelFamily.PLS]
    at = page_on(label)
    ev = service(fam, review.model_evidence, label)
    cv = next(spec for title, spec in charts(at).items() if title.startswith("Cross-validation"))
    np.testing.assert_allclose(array(cv["data"][0]["y"]), ev["cv_curve"]["rmsecv"])


