"""Validation statistics against scipy/scikit-learn, and the verdict."""

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LinearRegression
from sklearn.metrics import r2_score, root_mean_squared_error

from registry.chemometrics import AcceptanceCriteria, validation_statistics, verdict
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
    # source: sklearn.metrics.root_mean_squared_error (SEP as RMS = RMSEP)
    assert s.sep == pytest.approx(root_mean_squared_error(y, pred), rel=1e-12)
    assert s.rmsep == s.sep
    # source: sklearn.metrics.r2_score
    assert s.r2 == pytest.approx(r2_score(y, pred), rel=1e-12)
    # source: scipy.stats.linregress of predicted on reference
    lr = stats.linregress(y, pred)
    assert (s.slope, s.intercept) == (pytest.approx(lr.slope, rel=1e-12),
                                      pytest.approx(lr.intercept, rel=1e-10))
    # source: numpy mean and sample SD (ddof=1) of the errors
    assert s.bias == pytest.approx(np.mean(e)) and s.sdv == pytest.approx(np.std(e, ddof=1))
    # SEP² = bias² + SDV²·(n-1)/n, an identity of the definitions
    assert s.sep ** 2 == pytest.approx(s.bias ** 2 + s.sdv ** 2 * (s.n - 1) / s.n, rel=1e-12)


def test_sec_uses_n_minus_a_minus_one(diabetes_predictions):
    # source: SEC = sqrt(sum e^2 / (n - A - 1)) (ASTM E1655-style, from memory)
    y, pred = diabetes_predictions
    s = validation_statistics(y, pred, n_components=4)
    assert s.sec == pytest.approx(np.sqrt(np.sum((pred - y) ** 2) / (len(y) - 5)))


def test_verdict_reasons(diabetes_predictions):
    y, pred = diabetes_predictions
    good = validation_statistics(y, pred, n_components=3, reproducibility=80.0)
    passed, reasons = verdict(good, AcceptanceCriteria())
    # bias of this split is not significant at 95 % (scipy ttest p > 0.05)
    assert stats.ttest_1samp(pred - y, 0).pvalue > 0.05
    assert passed and reasons == []
    biased = validation_statistics(y, pred + 30.0, n_components=3, reproducibility=80.0)
    passed, reasons = verdict(biased)
    assert not passed and any("bias" in r for r in reasons)
    small = validation_statistics(y[:10], pred[:10], n_components=6, reproducibility=80.0)
    passed, reasons = verdict(small)
    assert any("need at least 24" in r for r in reasons)  # max(20, 4*6), common practice
    tight = validation_statistics(y, pred, reproducibility=10.0)
    assert any("SEP" in r for r in verdict(tight)[1])
    unknown_r = validation_statistics(y, pred)
    assert any("reproducibility" in r for r in verdict(unknown_r)[1])
    assert verdict(unknown_r, AcceptanceCriteria(max_sep_over_reproducibility=None))[0]


def test_bad_input():
    with pytest.raises(InputError, match="reference values but"):
        validation_statistics([1, 2, 3], [1, 2])
    with pytest.raises(InputError) as info:
        validation_statistics([1, 2, np.nan, 4], [1, 2, 3, 4])
    assert info.value.field == "y_ref"
