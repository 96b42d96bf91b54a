"""Cross-validation: folds, RMSECV against scikit-learn, component selection."""

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold, cross_val_predict
from scipy.signal import savgol_filter
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer
from chemotools.scatter import MultiplicativeScatterCorrection

from registry.chemometrics import assign_folds, cross_validate_pls
from registry.chemometrics.crossval import haaland_thomas, one_standard_error
from registry.errors import InputError
from registry.spectra.preprocessing import Recipe


def _sklearn_rmsecv(X, y, A_max, cv, pipeline_head=None):
    out = []
    for a in range(1, A_max + 1):
        est = PLSRegression(a, scale=False)
        if pipeline_head is not None:
            est = make_pipeline(pipeline_head(), est)
        pred = cross_val_predict(est, X, y, cv=cv).ravel()
        out.append(np.sqrt(np.mean((y - pred) ** 2)))
    return np.array(out)


def test_rmsecv_equals_sklearn_cross_val_predict(low_rank_regression):
    # source: sklearn.model_selection.cross_val_predict with KFold(10) and
    # PLSRegression(scale=False), one run per component count
    X, y = low_rank_regression
    result = cross_validate_pls(X, y, 12, folds=10, method="kfold")
    expected = _sklearn_rmsecv(X, y, 12, KFold(10))
    np.testing.assert_allclose(result.rmsecv, expected, rtol=1e-9)
    np.testing.assert_allclose(result.press, expected ** 2 * len(y), rtol=1e-8)


def test_per_fold_msc_equals_sklearn_pipeline(fermentation):
    # source: a scikit-learn Pipeline (column mask, scipy savgol_filter,
    # chemotools MSC, PLSRegression) under cross_val_predict refits MSC on
    # each training fold, as ours must.
    # Data: chemotools' shipped fermentation mid-IR set (glucose by HPLC);
    # no fuel NIR/IR set ships with chemotools 0.5.0 or scikit-learn.
    X, y, axis = fermentation
    recipe = [{"step": "region", "keep": [[950, 1550]]},
              {"step": "savgol", "window_length": 15, "polyorder": 2, "deriv": 1},
              {"step": "msc"}]
    pre = Recipe.from_json(recipe).build(axis)
    result = cross_validate_pls(X, y, 6, folds=7, method="kfold", preprocessor=pre)
    mask = (axis >= 950) & (axis <= 1550)

    def head():
        return make_pipeline(
            FunctionTransformer(lambda Z: savgol_filter(Z[:, mask], 15, 2, deriv=1, axis=1)),
            MultiplicativeScatterCorrection())
    expected = _sklearn_rmsecv(X, y, 6, KFold(7), pipeline_head=head)
    np.testing.assert_allclose(result.rmsecv, expected, rtol=1e-8)
    # ratio of performance to deviation SD(y)/RMSECV > 3 for a usable
    # quantitative model (common practice; Williams, from memory)
    assert y.std(ddof=1) / result.rmsecv[result.selected_components - 1] > 3


def test_kfold_identical_to_sklearn():
    # source: sklearn.model_selection.KFold(shuffle=False) and (shuffle=True, seed)
    for n, k in [(23, 5), (100, 10), (11, 11)]:
        for method, kf in [("kfold", KFold(k)), ("random", KFold(k, shuffle=True, random_state=3))]:
            folds = assign_folds(n, k, method=method, random_state=3)
            expected = np.empty(n, dtype=int)
            for f, (_, test) in enumerate(kf.split(np.zeros(n))):
                expected[test] = f
            np.testing.assert_array_equal(folds, expected)


def test_grouped_kfold_is_kfold_over_groups_in_order_of_appearance():
    # source: KFold(shuffle=False) applied to the unique group labels
    groups = np.array(["c", "c", "a", "a", "a", "z", "b", "b", "d", "e", "e", "f"])
    units = ["c", "a", "z", "b", "d", "e", "f"]
    folds = assign_folds(len(groups), 3, groups, method="kfold")
    expected = {}
    for f, (_, test) in enumerate(KFold(3).split(np.zeros(len(units)))):
        expected.update({units[i]: f for i in test})
    assert [int(v) for v in folds] == [expected[g] for g in groups]


def test_venetian_and_loso():
    # source: definition (venetian blinds: unit i -> fold i mod k; leave one
    # sample out: one group per fold)
    np.testing.assert_array_equal(assign_folds(10, 3, method="venetian"), np.arange(10) % 3)
    groups = [5, 5, 9, 1, 1, 1]
    np.testing.assert_array_equal(assign_folds(6, 2, groups, method="loso"), [0, 0, 1, 2, 2, 2])


@settings(max_examples=60, deadline=None)
@given(labels=st.lists(st.integers(0, 12), min_size=4, max_size=60),
       method=st.sampled_from(["kfold", "venetian", "loso", "random"]),
       k=st.integers(2, 6), seed=st.integers(0, 2**16))
def test_replicates_never_straddle_folds(labels, method, k, seed):
    # source: requirement that replicate spectra of one sample share a fold
    groups = np.array(labels)
    n_units = np.unique(groups).size
    if method != "loso" and k > n_units:
        with pytest.raises(InputError):
            assign_folds(len(groups), k, groups, method=method, random_state=seed)
        return
    folds = assign_folds(len(groups), k, groups, method=method, random_state=seed)
    for g in np.unique(groups):
        assert np.unique(folds[groups == g]).size == 1
    expected_folds = n_units if method == "loso" else k
    assert np.unique(folds).size == expected_folds


def test_default_folds_are_venetian_blinds_and_do_not_extrapolate(low_rank_regression):
    # Rows sorted by y (as a set ordered by time or by value is): contiguous blocks hold
    # out the ends of the range, so each test block is an extrapolation. Reference: the
    # RMSECV of scikit-learn cross_val_predict(PLSRegression(scale=False)) with shuffled
    # KFold (five seeds), which does not depend on the row order. Venetian blinds
    # (unit j -> fold j mod k; common practice) must agree with it, contiguous blocks not.
    X, y = low_rank_regression
    order = np.argsort(y)
    X, y = X[order], y[order]
    A, k = 8, 5
    shuffled = np.mean([
        np.sqrt(np.mean((y - cross_val_predict(PLSRegression(A, scale=False), X, y,
                                               cv=KFold(k, shuffle=True, random_state=seed)).ravel()) ** 2))
        for seed in range(5)])
    default = cross_validate_pls(X, y, A, folds=k)
    contiguous = cross_validate_pls(X, y, A, folds=k, method="kfold")
    assert default.method == "venetian"
    np.testing.assert_array_equal(default.fold_of_sample, np.arange(len(y)) % k)
    assert default.rmsecv[A - 1] == pytest.approx(shuffled, rel=0.10)
    assert contiguous.rmsecv[A - 1] > 1.25 * default.rmsecv[A - 1]


@settings(max_examples=60, deadline=None)
@given(labels=st.lists(st.integers(0, 12), min_size=4, max_size=60), k=st.integers(2, 4))
def test_default_folds_keep_replicates_together(labels, k):
    # source: requirement that replicate spectra of one sample share a fold; with the
    # default method, units (samples) in order of first appearance go to fold j mod k
    groups = np.array(labels)
    units = list(dict.fromkeys(labels))
    assume(k <= len(units))
    folds = assign_folds(len(groups), k, groups)
    for j, g in enumerate(units):
        assert set(folds[groups == g].tolist()) == {j % k}


def test_haaland_thomas_rule():
    # source: Haaland & Thomas, Anal. Chem. 60:1193 (1988): smallest A with
    # PRESS(A)/min PRESS below the F(n, n) quantile at probability 0.75,
    # evaluated here with scipy's ppf (the code uses the cdf)
    n = 30
    press = np.array([90.0, 40.0, 26.0, 22.0, 20.0, 19.5, 21.0])
    f_crit = stats.f.ppf(0.75, n, n)
    expected = 1 + next(a for a in range(len(press)) if press[a] / press.min() < f_crit)
    chosen, ratio, p = haaland_thomas(press, n, 0.75)
    assert chosen == expected == 4
    np.testing.assert_allclose(p, stats.f.sf(press / press.min(), n, n))


def test_one_standard_error_rule():
    # source: Hastie, Tibshirani & Friedman, ESL 2nd ed. §7.10: smallest model
    # within one standard error (SD of fold errors / sqrt(k)) of the best
    fold_mse = np.array([[5.0, 2.1, 1.9, 2.0], [6.0, 2.6, 2.2, 2.3],
                         [5.5, 2.0, 1.8, 1.7], [6.5, 2.5, 2.1, 2.2]])
    cv = fold_mse.mean(0)
    se = fold_mse.std(0, ddof=1) / 2.0
    best = int(np.argmin(cv))
    expected = 1 + min(a for a in range(4) if cv[a] <= cv[best] + se[best])
    assert one_standard_error(fold_mse) == expected == 3


def test_selection_and_override(low_rank_regression):
    X, y = low_rank_regression
    ht = cross_validate_pls(X, y, 15, folds=5)
    assert ht.selection_rule == "haaland-thomas"
    assert 1 <= ht.selected_components <= ht.min_press_components
    ose = cross_validate_pls(X, y, 15, folds=5, selection="one-se")
    assert ose.selected_components == ose.one_se_components
    user = cross_validate_pls(X, y, 15, folds=5, n_components=3)
    assert (user.selected_components, user.selection_rule) == (3, "user")
    np.testing.assert_array_equal(user.rmsecv, ht.rmsecv)


def test_bad_cv_arguments(low_rank_regression):
    X, y = low_rank_regression
    with pytest.raises(InputError) as info:
        cross_validate_pls(X, y, 80, folds=5)
    assert info.value.field == "max_components"
    with pytest.raises(InputError, match="unknown fold method"):
        cross_validate_pls(X, y, 3, method="blocks")
    with pytest.raises(InputError, match="exceeds max_components"):
        cross_validate_pls(X, y, 3, n_components=4)


def test_haaland_thomas_edge_cases():
    # source: the rule itself: with alpha below cdf(1) ≈ 0.5 no count passes,
    # so the minimum-PRESS count is kept; an exact fit makes all others worse
    press = np.array([50.0, 20.0, 10.0, 12.0])
    assert haaland_thomas(press, 25, alpha=0.3)[0] == 3
    assert haaland_thomas(np.array([4.0, 0.0, 0.0]), 25)[0] == 2
