"""The reviewer's evidence of every model family (registry.services.review), checked against
independent computations from the stored spectra:

* band height above the two-point baseline recomputed with numpy (np.interp for the
  anchors and band edges; Beer–Lambert band measurement, common practice) and the
  calibration line against numpy.polyfit;
* the CLS fit against numpy.linalg.lstsq of the spectrum on [K; G] (Haaland &
  Easterling, Appl. Spectrosc. 34:539, 1980) and the condition number against
  numpy.linalg.cond;
* the derived uncertainty against the first-order formula for (RON + MON)/2,
  u² = (½·SEP_RON)² + (½·SEP_MON)² (JCGM 100:2008, §5.1.2), from the inputs' validation
  records;
* the look-up's neighbours against scikit-learn's PCA and KNeighborsRegressor.

The registry (tests/family_registry.py) is invented data from seed_demo.synthetic.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from registry.chemometrics.family_names import ModelFamily
from registry.services import models as model_svc
from registry.services import review
from registry.services.calibration import get_calset, members_of
from registry.storage.engine import make_engine, session_scope
from registry.storage.models import ModelVersion, Sample, ValidationRecord
from tests.factories import copy_sqlite
from tests.family_registry import N

pytestmark = pytest.mark.slow  # the shared registry takes about 17 s to build on 2 cores


@pytest.fixture
def fam(every_family_built, tmp_path):
    copy_sqlite(every_family_built.path, tmp_path / "r.db")
    engine = make_engine(f"sqlite:///{tmp_path / 'r.db'}")
    yield engine, every_family_built
    engine.dispose()


def evidence(engine, reg, family, spectrum=None):
    """(model_evidence, spectrum_evidence of ``spectrum`` or of the first spectrum of the
    kind the page opens on)."""
    with session_scope(engine) as s:
        ev = review.model_evidence(s, reg.actors["auditor"], reg.labels[family])
        if spectrum is None:
            spectrum = next(x for x in ev["spectra"] if x["kind"] == "validation")["spectrum_id"]
        sp = review.spectrum_evidence(s, reg.actors["auditor"], reg.labels[family], spectrum)
    return ev, sp


def stored(reg, spectrum_id: int) -> np.ndarray:
    """The spectrum as imported (float32 in the CSV and the store)."""
    pop, k = (reg.population, spectrum_id - 1) if spectrum_id <= N else (reg.diesel,
                                                                          spectrum_id - N - 1)
    return pop.spectra[k].astype(np.float32).astype(np.float64)


def calibration_names(engine, calset: str) -> list[str]:
    with session_scope(engine) as s:
        return [s.get(Sample, m.sample_id).external_id
                for m in members_of(s, get_calset(s, calset), "cal")]


def height_above_baseline(x, axis, band, anchors):
    """max(A − b) over the band's axis points and its two edges, b the straight line
    through the absorbance at the anchors (independent numpy version)."""
    a = np.interp(anchors, axis, x)
    line = lambda nu: a[0] + (a[1] - a[0]) * (nu - anchors[0]) / (anchors[1] - anchors[0])  # noqa: E731
    inside = (axis > band[0]) & (axis < band[1])
    nu = np.r_[band[0], axis[inside], band[1]]
    return float(np.max(np.interp(nu, axis, x) - line(nu)))


@pytest.mark.parametrize("family", list(ModelFamily))
def test_validation_predictions_reproduce_the_latest_record(fam, family):
    """Family-independent evidence: the validation set predicted now gives the stored
    record's statistics (e = ŷ − y; bias, SEP with n − 1, RMSEP: ISO 12099)."""
    engine, reg = fam
    ev, _ = evidence(engine, reg, family)
    val, rec = ev["validation_set"], ev["latest_validation"]
    e = val["predicted"] - val["reference"]
    assert rec["n"] == e.size and rec["passed"] is True
    assert rec["bias"] == pytest.approx(e.mean(), rel=1e-9, abs=1e-12)
    assert rec["sep"] == pytest.approx(np.std(e, ddof=1), rel=1e-9)
    assert rec["rmsep"] == pytest.approx(np.sqrt(np.mean(e ** 2)), rel=1e-9)
    # σ_R = R/2.77 (ISO 5725-6) of the reference method at the validation mean
    assert ev["precision"]["sigma_R"] == pytest.approx(ev["precision"]["R"] / 2.77, rel=1e-2)
    assert ev["description"] == model_svc.DESCRIPTIONS[family]
    assert (ev["cross_validation"] is not None) == (family == ModelFamily.PLS)


def test_band_evidence_recomputed_from_the_stored_spectra(fam):
    engine, reg = fam
    ev, _ = evidence(engine, reg, ModelFamily.BAND)
    typical = ev["spectra"][0]
    assert typical["kind"] == "calibration"
    _, sp = evidence(engine, reg, ModelFamily.BAND, typical["spectrum_id"])
    band, anchors = (668.0, 680.0), (668.0, 680.0)
    x, axis = stored(reg, typical["spectrum_id"]), reg.population.axis
    assert sp["band_value"] == pytest.approx(height_above_baseline(x, axis, band, anchors),
                                             rel=1e-9)
    # the drawn baseline is the line through the anchors; the drawn spectrum is the stored one
    a = np.interp(anchors, axis, x)
    np.testing.assert_allclose(sp["anchor_absorbance"], a, rtol=1e-12)
    np.testing.assert_allclose(sp["baseline"], a[0] + (a[1] - a[0]) * (sp["axis"] - 668.0) / 12.0,
                               rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(sp["absorbance"], np.interp(sp["axis"], axis, x), rtol=1e-12)
    assert sp["axis"].min() < 668.0 and sp["axis"].max() > 680.0  # the band in its surroundings
    # the calibration line: every calibration sample's height, fitted by numpy.polyfit
    f = ev["family_evidence"]
    names = calibration_names(engine, "BENZENE-A")
    heights = [height_above_baseline(stored(reg, int(n[1:]) + 1), axis, band, anchors)
               for n in names]
    np.testing.assert_allclose(f["calibration_values"], heights, rtol=1e-9)
    b1, b0 = np.polyfit(f["calibration_values"], f["calibration_y"], 1)
    np.testing.assert_allclose(f["coefficients"], [b0, b1], rtol=1e-9)
    assert sp["y_pred"] == pytest.approx(b0 + b1 * sp["band_value"], rel=1e-9)
    fitted = b0 + b1 * np.asarray(f["calibration_values"])
    sec = np.sqrt(np.sum((f["calibration_y"] - fitted) ** 2) / (len(fitted) - 2))
    assert f["statistics"]["sec"] == pytest.approx(sec, rel=1e-9)


def test_cls_fit_equals_least_squares_on_k_and_the_baseline(fam):
    engine, reg = fam
    ev, sp = evidence(engine, reg, ModelFamily.CLS)
    f = ev["family_evidence"]
    assert f["outputs"] == ["ETHANOL", "MTBE"] and np.shape(f["K"])[0] == 2
    axis = reg.population.axis
    keep = (axis >= 1000) & (axis <= 1250)
    np.testing.assert_array_equal(sp["axis"], axis[keep])
    x = stored(reg, sp["spectrum_id"])[keep]
    np.testing.assert_allclose(sp["measured"], x, rtol=1e-12)
    line = (axis[keep] - (axis[keep].max() + axis[keep].min()) / 2) / (
        (axis[keep].max() - axis[keep].min()) / 2)
    design = np.vstack([f["K"], np.ones(keep.sum()), line])  # [K; G]
    coef, *_ = np.linalg.lstsq(design.T, x, rcond=None)
    fitted = coef @ design
    np.testing.assert_allclose(sp["concentrations"], coef[:2], rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(sp["fitted"], fitted, rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(sp["residual"], x - fitted, rtol=1e-6, atol=1e-10)
    assert sp["q"] == pytest.approx(np.sum((x - fitted) ** 2), rel=1e-6)
    # condition number of K after removing the baseline span, rows scaled to unit length
    G = design[2:]
    Kp = np.asarray(f["K"]) - np.linalg.lstsq(G.T, np.asarray(f["K"]).T, rcond=None)[0].T @ G
    Kp /= np.linalg.norm(Kp, axis=1)[:, None]
    assert f["condition_number"] == pytest.approx(np.linalg.cond(Kp), rel=1e-9)
    assert sp["q_limit"] == f["q_limit"] > 0


def test_derived_uncertainty_is_the_first_order_formula(fam):
    engine, reg = fam
    ev, sp = evidence(engine, reg, ModelFamily.DERIVED)
    terms = {t["code"]: t for t in sp["inputs"]}
    sep, value = {}, {}
    with session_scope(engine) as s:
        for code in ("RON", "MON"):
            mv = s.exec(select(ModelVersion).where(
                ModelVersion.label == sp["inputs_used"][code]["model"])).one()
            sep[code] = s.exec(select(ValidationRecord.sep).where(
                ValidationRecord.model_version_id == mv.id, ValidationRecord.passed)
                .order_by(ValidationRecord.id.desc())).first()
            value[code] = float(model_svc.assess_spectra(s, mv, [sp["spectrum_id"]]).y[0])
    assert sp["inputs_used"]["RON"]["model"] == reg.labels[ModelFamily.PLS]
    # AKI = (RON + MON)/2 (ASTM D4814, from memory): ∂/∂RON = ∂/∂MON = ½, so to first
    # order u² = (½·SEP_RON)² + (½·SEP_MON)² (JCGM 100:2008, §5.1.2)
    u = np.sqrt((0.5 * sep["RON"]) ** 2 + (0.5 * sep["MON"]) ** 2)
    assert sp["uncertainty"] == pytest.approx(u, rel=1e-12)
    assert sp["y_pred"] == pytest.approx((value["RON"] + value["MON"]) / 2, rel=1e-12)
    for code in ("RON", "MON"):
        assert terms[code]["value"] == pytest.approx(value[code], rel=1e-12)
        assert terms[code]["derivative"] == 0.5
        assert terms[code]["contribution"] == pytest.approx((0.5 * sep[code]) ** 2, rel=1e-12)
    # the versions in use now are those the derived version was trained with
    assert [(i["code"], i["current"], i["changed"]) for i in ev["inputs"]] == [
        ("MON", sp["inputs_used"]["MON"]["model"], False),
        ("RON", reg.labels[ModelFamily.PLS], False)]


def test_lookup_neighbours_equal_scikit_learn(fam):
    """The neighbours, distances and looked-up value equal scikit-learn's
    KNeighborsRegressor (uniform weights, k = 10) on PCA scores scaled to unit variance
    (Mahalanobis distance on the scores), the PCA fitted by scikit-learn on the same
    preprocessed calibration spectra."""
    PCA = pytest.importorskip("sklearn.decomposition").PCA
    KNeighborsRegressor = pytest.importorskip("sklearn.neighbors").KNeighborsRegressor
    from registry.services.models import DEFAULT_RECIPE
    from registry.spectra.preprocessing import Recipe

    engine, reg = fam
    ev, sp = evidence(engine, reg, ModelFamily.NEIGHBOURS)
    f = ev["family_evidence"]
    names = calibration_names(engine, "T50-A")
    rows = [int(n[1:]) for n in names]
    axis = reg.diesel.axis
    pipe = Recipe.from_json(DEFAULT_RECIPE, axis).build(axis)
    X = pipe.fit_transform(reg.diesel.spectra[rows].astype(np.float32).astype(np.float64))
    pca = PCA(n_components=f["n_components"], svd_solver="full").fit(X)
    scale = np.sqrt(pca.explained_variance_)
    knn = KNeighborsRegressor(n_neighbors=10, weights="uniform").fit(
        pca.transform(X) / scale, f["calibration_y"])
    q = pca.transform(pipe.transform(stored(reg, sp["spectrum_id"])[None, :])) / scale
    dist, idx = knn.kneighbors(q)
    assert sp["samples"] == [names[i] for i in idx[0]]
    np.testing.assert_allclose(sp["neighbour_distance"], dist[0], rtol=1e-6)
    np.testing.assert_allclose(sp["neighbour_value"], np.asarray(f["calibration_y"])[idx[0]])
    assert sp["y_pred"] == pytest.approx(knn.predict(q)[0], rel=1e-12)
    values = np.asarray(f["calibration_y"])[idx[0]]
    assert sp["spread"] == pytest.approx(values.max() - values.min(), rel=1e-12)
    assert sp["distance_limit"] == 1.5 and not sp["flags"]


def test_derived_evidence_says_when_an_input_has_no_version_in_use(fam):
    """With its RON model retired, the derived version's validation set cannot be
    predicted: the evidence says so (a warning naming RON) and still gives the formula and
    the inputs, the RON row marked as changed with no version in use."""
    from registry.services import lifecycle
    from tests.conftest import PASSWORD

    engine, reg = fam
    with session_scope(engine) as s:
        lifecycle.retire_model(s, reg.actors["lab_manager"], reg.labels[ModelFamily.PLS],
                               password=PASSWORD, reason="superseded")
    with session_scope(engine) as s:
        ev = review.model_evidence(s, reg.actors["auditor"], reg.labels[ModelFamily.DERIVED])
    assert ev["validation_set"] is None
    assert any("cannot be predicted now" in w and "RON" in w for w in ev["warnings"])
    assert ev["family_evidence"]["formula"] == "(RON + MON) / 2"
    ron = next(i for i in ev["inputs"] if i["code"] == "RON")
    assert ron["current"] is None and ron["changed"] is True
    assert ev["latest_validation"]["passed"] is True  # the stored record is still shown
