"""Validation statistics against scipy/scikit-learn, and the verdict."""

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LinearRegression
from sklearn.metrics import r2_score, root_mean_squared_error

from registry.chemometrics import AcceptanceCriteria, validation_statistics, verdict
from registry.chemometrics.validation import (precision_summary, rule_text,
                                              statistics_from_json)
from registry.errors import InputError


@pytest.fixture(scope="module")
def diabetes_predictions():
    # scikit-learn's shipped diabetes data: a linear model fitted on the first
    # 300 patients predicts the remaining 142 (a real prediction/reference pair)
    X, y = load_diabetes(return_X_y=True)
    pred = LinearRegression().fit(X[:300], y[:300]).predict(X[300:])
    return y[300:], pred


def test_statistics_equal_reference_implementations(diabetes_predictions):
    y, pred = diabetes_predictions
    s = validation_statistics(y, pred, reproducibility=100.0)
    e = pred - y
    # source: scipy.stats.ttest_1samp of the errors against 0 (bias t-test)
    t = stats.ttest_1samp(e, 0.0)
    assert s.bias_t == pytest.approx(t.statistic, rel=1e-12)
    assert s.bias_p == pytest.approx(t.pvalue, rel=1e-10)
    # source: sklearn.metrics.root_mean_squared_error (RMSEP, root mean square of the errors)
    assert s.rmsep == pytest.approx(root_mean_squared_error(y, pred), rel=1e-12)
    # source: sklearn.metrics.r2_score
    assert s.r2 == pytest.approx(r2_score(y, pred), rel=1e-12)
    # source: scipy.stats.linregress of predicted on reference
    lr = stats.linregress(y, pred)
    assert (s.slope, s.intercept) == (pytest.approx(lr.slope, rel=1e-12),
                                      pytest.approx(lr.intercept, rel=1e-10))
    # source: numpy mean and sample SD (ddof=1) of the errors: bias and SEP, the
    # bias-corrected SD of the errors (ISO 12099:2017; Næs et al., A User-Friendly Guide to
    # Multivariate Calibration and Classification, 2002)
    assert s.bias == pytest.approx(np.mean(e), rel=1e-12)
    assert s.sep == pytest.approx(np.std(e, ddof=1), rel=1e-12)
    # RMSEP² = bias² + SEP²·(n-1)/n (Næs et al. 2002), an identity of the definitions
    assert s.rmsep ** 2 == pytest.approx(s.bias ** 2 + s.sep ** 2 * (s.n - 1) / s.n, rel=1e-12)
    # even unbiased, SEP (n − 1) and RMSEP (n) differ here by 0.3 %: swapping them shows
    assert abs(s.rmsep - s.sep) > 1e-3 * s.sep
    # with a bias the two part: SEP ignores it (same as before), RMSEP grows
    shifted = validation_statistics(y, pred + 30.0)
    assert shifted.sep == pytest.approx(np.std(e + 30.0, ddof=1), rel=1e-12)
    assert shifted.rmsep == pytest.approx(root_mean_squared_error(y, pred + 30.0), rel=1e-12)
    assert shifted.rmsep > 1.1 * shifted.sep


def test_sec_uses_n_minus_a_minus_one(diabetes_predictions):
    # source: SEC = sqrt(sum e^2 / (n - A - 1)) (ASTM E1655-style, from memory)
    y, pred = diabetes_predictions
    s = validation_statistics(y, pred, n_components=4)
    assert s.sec == pytest.approx(np.sqrt(np.sum((pred - y) ** 2) / (len(y) - 5)))


def test_verdict_reasons(diabetes_predictions):
    y, pred = diabetes_predictions
    # SEP 53.0; R = 160 gives σ_R = 160/2.77 = 57.7 (ISO 5725-6), SEP/σ_R = 0.92
    good = validation_statistics(y, pred, n_components=3, reproducibility=160.0)
    passed, reasons = verdict(good, AcceptanceCriteria())
    # bias of this split is not significant at 95 % (scipy ttest p > 0.05)
    assert stats.ttest_1samp(pred - y, 0).pvalue > 0.05
    assert passed and reasons == []
    biased = validation_statistics(y, pred + 30.0, n_components=3, reproducibility=160.0)
    passed, reasons = verdict(biased)
    assert not passed and any("bias" in r for r in reasons)
    small = validation_statistics(y[:10], pred[:10], n_components=6, reproducibility=160.0)
    passed, reasons = verdict(small)
    assert any("need at least 24" in r for r in reasons)  # max(20, 4*6), common practice
    tight = validation_statistics(y, pred, reproducibility=10.0)
    assert any("SEP" in r for r in verdict(tight)[1])
    unknown_r = validation_statistics(y, pred)
    assert any("reproducibility" in r for r in verdict(unknown_r)[1])
    assert verdict(unknown_r, AcceptanceCriteria(max_sep_over_sigma_r=None))[0]


def _with_reproducibility(s, R):
    from dataclasses import replace

    return replace(s, reproducibility=R)


def test_acceptance_compares_sep_with_sigma_r_not_with_r(diabetes_predictions):
    # source: R is the 95 % limit on the difference of two results, R = 1.96·√2·σ_R
    # = 2.77·σ_R (ISO 5725-6:1994, 4.1.4; ASTM E177); the SEP, a standard deviation, is
    # compared with σ_R. Default factor 1.0 (common practice).
    y, pred = diabetes_predictions
    s = validation_statistics(y, pred, n_components=3)
    sigma_r_at_boundary = s.sep / 1.5          # SEP = 1.5·σ_R
    R = 1.96 * np.sqrt(2.0) * sigma_r_at_boundary
    assert s.rmsep <= R                         # the old rule "RMSEP ≤ 1.0·R" passed it
    at = _with_reproducibility(s, R)
    passed, reasons = verdict(at)
    assert not passed and any("σ_R" in r and "1.5" in r for r in reasons)
    assert at.sep_over_sigma_r == pytest.approx(1.5, rel=1e-12)
    # just inside the limit it passes, and the factor is configurable
    assert verdict(_with_reproducibility(s, 1.96 * np.sqrt(2.0) * s.sep / 0.999))[0]
    assert verdict(at, AcceptanceCriteria(max_sep_over_sigma_r=1.6))[0]
    # 1.96·SEP is shown against R: 1.96 = scipy.stats.norm.ppf(0.975) to 3 decimals
    summary = precision_summary(at.to_json(), {**AcceptanceCriteria().to_json(),
                                               "rule": AcceptanceCriteria().rule_text()})
    assert summary["sep_95"] == pytest.approx(stats.norm.ppf(0.975) * s.sep, rel=1e-4)
    assert summary["reproducibility"] == R and "SEP ≤ 1·σ_R" in summary["rule"]


def test_records_of_the_old_layout_stay_readable(diabetes_predictions):
    # Before revision 0003 the stored statistics had sdv = SEP and sep = rmsep = RMSEP, and
    # the criteria compared the RMSEP with k·R; both must read back as what they were.
    y, pred = diabetes_predictions
    new = validation_statistics(y, pred, reproducibility=160.0)
    old = {k: v for k, v in new.to_json().items()
           if k not in ("layout", "sigma_R", "sep_over_sigma_r", "sep_95")}
    old.update(sdv=new.sep, sep=new.rmsep, rmsep=new.rmsep)
    assert statistics_from_json(old) == new
    assert statistics_from_json(new.to_json()) == new
    old_criteria = {"bias_alpha": 0.05, "max_sep_over_reproducibility": 1.0, "min_samples": 20,
                    "min_samples_per_component": 4, "min_r2": None, "max_abs_bias": None}
    assert "RMSEP ≤ 1·R (rule before revision 0003)" in rule_text(old_criteria)
    assert "σ_R" not in rule_text(old_criteria)
    summary = precision_summary(old, old_criteria)
    assert (summary["sep"], summary["rmsep"]) == (new.sep, new.rmsep)


def test_bad_input():
    with pytest.raises(InputError, match="reference values but"):
        validation_statistics([1, 2, 3], [1, 2])
    with pytest.raises(InputError) as info:
        validation_statistics([1, 2, np.nan, 4], [1, 2, 3, 4])
    assert info.value.field == "y_ref"
