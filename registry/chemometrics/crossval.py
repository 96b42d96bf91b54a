"""Cross-validated PLS1: RMSECV for every component count, and the choice of A.

One ikpls fit per fold gives the predictions of all component counts at once
(:class:`ikpls.numpy.PLS.predict` returns shape (A, n, 1)).

Choosing the number of components
---------------------------------
``"haaland-thomas"`` (Haaland & Thomas, Anal. Chem. 60:1193-1202, 1988):
    let A* minimise PRESS over 1..max_components and, for every A ≤ A*,
    F(A) = PRESS(A) / PRESS(A*). The selected A is the smallest A whose
    F(A) is *not* significantly larger than 1: the F distribution with
    (n, n) degrees of freedom, n = number of cross-validated samples, gives
    ``cdf(F(A)) < alpha`` (alpha = 0.75 as recommended in the paper).
    ``f_test_p`` stores the upper-tail probability 1 - cdf, so the rule
    reads ``f_test_p > 1 - alpha``. A* itself always qualifies (F = 1 gives
    cdf ≈ 0.5). With replicate groups n is still the number of spectra, as
    in the paper's use of the number of calibration samples.
``"one-se"`` (Hastie, Tibshirani & Friedman, The Elements of Statistical
    Learning, 2nd ed. 2009, §7.10): per fold the mean squared error; CV(A) =
    mean over folds, SE(A) = its standard deviation (ddof = 1) / √k. The
    selected A is the smallest with CV(A) ≤ CV(A*) + SE(A*), A* = argmin CV.
``n_components`` given: that value is used (``selection_rule = "user"``);
    the rules' values are still computed and stored.
"""

from __future__ import annotations

import warnings
from contextlib import nullcontext
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats
from sklearn.base import clone
from threadpoolctl import threadpool_limits

from registry.chemometrics.folds import assign_folds
from registry.chemometrics.pls import check_xy, make_ikpls
from registry.errors import InputError

SELECTION_RULES = ("haaland-thomas", "one-se")


@dataclass
class CVResult:
    """Outcome of :func:`cross_validate_pls`.

    Arrays are indexed by ``A - 1`` (component counts 1..max_components).
    """

    rmsecv: np.ndarray          # sqrt(PRESS / n)
    press: np.ndarray           # Σ (y - ŷ_cv)²
    predictions: np.ndarray     # (n, max_components) cross-validated ŷ
    fold_of_sample: np.ndarray  # (n,) 0-based fold index
    fold_mse: np.ndarray        # (n_folds, max_components)
    f_ratio: np.ndarray         # PRESS(A) / min PRESS
    f_test_p: np.ndarray        # upper-tail F(n, n) probability of f_ratio
    selected_components: int
    selection_rule: str         # "haaland-thomas", "one-se" or "user"
    haaland_thomas_components: int
    one_se_components: int
    min_press_components: int
    alpha: float
    method: str
    n_folds: int
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def max_components(self) -> int:
        return int(self.rmsecv.shape[0])

    def summary_json(self) -> dict[str, Any]:
        """Scalars and the curve (no per-sample arrays) as plain JSON."""
        return {
            "rmsecv": [float(v) for v in self.rmsecv],
            "press": [float(v) for v in self.press],
            "f_test_p": [float(v) for v in self.f_test_p],
            "selected_components": self.selected_components,
            "selection_rule": self.selection_rule,
            "haaland_thomas_components": self.haaland_thomas_components,
            "one_se_components": self.one_se_components,
            "min_press_components": self.min_press_components,
            "alpha": self.alpha,
            "method": self.method,
            "n_folds": self.n_folds,
            "n_samples": int(self.predictions.shape[0]),
            **self.extra,
        }


def haaland_thomas(press: np.ndarray, n: int, alpha: float = 0.75) -> tuple[int, np.ndarray, np.ndarray]:
    """Haaland & Thomas (1988) choice; returns (A, F ratios, upper-tail p)."""
    a_star = int(np.argmin(press))
    if press[a_star] > 0:
        f_ratio = press / press[a_star]
    else:  # an exact fit: every other count is infinitely worse
        f_ratio = np.where(press > 0, np.inf, 1.0)
    cdf = stats.f.cdf(f_ratio, n, n)
    candidates = np.flatnonzero(cdf[: a_star + 1] < alpha)
    # with alpha below cdf(1) ≈ 0.5 nothing qualifies; A* is then the answer
    chosen = int(candidates[0]) + 1 if candidates.size else a_star + 1
    return chosen, f_ratio, 1.0 - cdf


def one_standard_error(fold_mse: np.ndarray) -> int:
    """One-standard-error rule (Hastie et al. 2009, §7.10) on per-fold MSE."""
    k = fold_mse.shape[0]
    cv = fold_mse.mean(axis=0)
    se = fold_mse.std(axis=0, ddof=1) / np.sqrt(k)
    a_star = int(np.argmin(cv))
    return int(np.flatnonzero(cv <= cv[a_star] + se[a_star])[0]) + 1


def _check_int(value: Any, name: str, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise InputError(f"{name} must be an integer >= {low}, got {value!r}", field=name)
    return int(value)


def cross_validate_pls(X, y, max_components: int, folds: int = 10, groups=None, *,
                       method: str = "venetian", random_state=None,
                       selection: str = "haaland-thomas", alpha: float = 0.75,
                       n_components: int | None = None, preprocessor=None,
                       blas_threads: int | None = 1) -> CVResult:
    """Cross-validate PLS1 for 1..max_components with one ikpls fit per fold.

    Parameters
    ----------
    X : array-like of shape (n_samples, n_features)
        Spectra, already preprocessed unless ``preprocessor`` is given.
    y : array-like of shape (n_samples,)
    max_components : int
    folds : int, default 10
    groups : array-like of shape (n_samples,), optional
        Replicates of one physical sample share a label and a fold.
    method : {"venetian", "kfold", "loso", "random"}, default "venetian"
        See :mod:`registry.chemometrics.folds`.
    random_state : int, optional
        Seed for ``method="random"``.
    selection : {"haaland-thomas", "one-se"}
    alpha : float, default 0.75
        Haaland–Thomas F-probability level.
    n_components : int, optional
        User override of the selected number of components.
    preprocessor : transformer, optional
        Unfitted scikit-learn style transformer (e.g. a
        :class:`registry.spectra.preprocessing.SpectralPipeline`); a clone is
        fitted on each training fold and applied to its test fold, so
        data-dependent steps (MSC reference, means) never see the test fold.
    blas_threads : int or None, default 1
        BLAS thread cap for the loop (threadpoolctl); None leaves it alone.

    Returns
    -------
    CVResult
    """
    X, y = check_xy(X, y)
    n = X.shape[0]
    max_components = _check_int(max_components, "max_components", 1)
    if selection not in SELECTION_RULES:
        raise InputError(f"unknown selection rule {selection!r}; use one of "
                         f"{', '.join(SELECTION_RULES)}", field="selection")
    if not 0.0 < float(alpha) < 1.0:
        raise InputError(f"alpha must be between 0 and 1, got {alpha!r}", field="alpha")
    if n_components is not None:
        n_components = _check_int(n_components, "n_components", 1)
        if n_components > max_components:
            raise InputError(f"n_components={n_components} exceeds max_components="
                             f"{max_components}", field="n_components")
    fold_of_sample = assign_folds(n, folds, groups, method=method, random_state=random_state)
    fold_ids = np.unique(fold_of_sample)
    predictions = np.empty((n, max_components))

    limiter = (threadpool_limits(limits=blas_threads, user_api="blas")
               if blas_threads is not None else nullcontext())
    with limiter:
        for f in fold_ids:
            test = fold_of_sample == f
            train = ~test
            X_train, X_test = X[train], X[test]
            if preprocessor is not None:
                prep = clone(preprocessor)
                X_train = prep.fit_transform(X_train)
                X_test = prep.transform(X_test)
            limit = min(X_train.shape[0] - 1, X_train.shape[1])
            if max_components > limit:
                raise InputError(f"max_components={max_components} exceeds what fold {int(f)} "
                                 f"supports (min(n_train - 1, n_features) = {limit})",
                                 field="max_components")
            model = make_ikpls()
            with warnings.catch_warnings():
                # components beyond the numerical rank repeat the last stable
                # regression vector; that is the right CV answer, not an error
                warnings.simplefilter("ignore", UserWarning)
                model.fit(X_train, y[train], max_components)
            predictions[test] = model.predict(X_test)[:, :, 0].T

    residual = y[:, None] - predictions
    squared = residual ** 2
    press = squared.sum(axis=0)
    rmsecv = np.sqrt(press / n)
    fold_mse = np.stack([squared[fold_of_sample == f].mean(axis=0) for f in fold_ids])

    ht, f_ratio, f_p = haaland_thomas(press, n, float(alpha))
    ose = one_standard_error(fold_mse) if fold_ids.size > 1 else ht
    if n_components is not None:
        chosen, rule = n_components, "user"
    else:
        chosen, rule = (ht, selection) if selection == "haaland-thomas" else (ose, selection)
    return CVResult(
        rmsecv=rmsecv, press=press, predictions=predictions, fold_of_sample=fold_of_sample,
        fold_mse=fold_mse, f_ratio=f_ratio, f_test_p=f_p, selected_components=int(chosen),
        selection_rule=rule, haaland_thomas_components=ht, one_se_components=ose,
        min_press_components=int(np.argmin(press)) + 1, alpha=float(alpha), method=method,
        n_folds=int(fold_ids.size),
    )
