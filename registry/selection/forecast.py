"""Forecasting prediction error against the number of reference tests.

The learning curve of a calibration — its prediction error against the
number of calibration samples — is measured on the existing calibration set
by repeated cross-validation on subsamples: the rows are split into folds at
random, and models calibrated on growing subsets of the other folds predict
each held-out fold (RMSECV against calibration size). It is fitted by an
inverse power law with a floor, the usual form for learning curves
(Mukherjee et al., J. Comput. Biol. 10:119, 2003; Figueroa et al., BMC Med.
Inform. Decis. Mak. 12:8, 2012; from memory), written for the mean squared
error:

    MSE(m) = σ_r² + c + a·m^(−b),    a, c >= 0, b > 0

m is the number of calibration samples. Every validation error contains the
reference method's own scatter, so σ_r² (σ_r = r/2.77, the repeatability
standard deviation, ISO 5725-6) is a floor the fit can never go below
(common practice); c is what more samples of this kind cannot remove (model
form, unmodelled effects); a·m^(−b) is what they can.

The fit is a variable projection: for fixed b the model is linear in a and
c, solved by non-negative least squares (Lawson & Hanson, Solving Least
Squares Problems, 1974); b is found by a grid and a bounded one-dimensional
search. Bands are bootstrap percentiles (Efron & Tibshirani, An Introduction
to the Bootstrap, 1993): the calibration rows are resampled (the whole curve
moves with the luck of the calibration sample) and the curve refit; each
forecast also carries the calibration-to-calibration scatter of the model
error seen between fold models (beyond what their held-out rows' sampling
explains) and, when asked, the sampling scatter of a validation set of given
size.

The forecast assumes the picks resemble the calibration population. When
the pool holds spectra outside the current model's space, the present error
on that production is larger than the curve says and the first picks there
help more than the curve says.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize
from threadpoolctl import threadpool_limits

from registry.chemometrics.crossval import cross_validate_pls
from registry.chemometrics.pls import PLSRegressor, check_xy
from registry.errors import InputError
from registry.selection._checks import check_count
from registry.selection.kennard_stone import kennard_stone
from registry.selection.space import SelectionSpace

CURVE_METHODS = ("random", "kennard-stone")
#: Range searched for the exponent b (b = 1 is the classical 1/m rate of a
#: correctly specified linear model; flatter and steeper curves are allowed).
EXPONENT_BOUNDS = (0.05, 4.0)
#: An improvement below this share of the present error is not worth a test
#: campaign (a choice, stated with the answer).
WORTHWHILE_GAIN = 0.05
#: Numbers of added picks forecast when none are given.
DEFAULT_STEPS = (5, 10, 20, 40, 80, 160)


# --------------------------------------------------------------- the law
@dataclass(frozen=True)
class PowerLaw:
    """``MSE(m) = floor_var + c + a·m^(−b)`` with ``floor_var = σ_r²``."""

    a: float
    b: float
    c: float
    floor_var: float = 0.0

    def mse(self, m) -> np.ndarray:
        m = np.asarray(m, dtype=np.float64)
        return self.floor_var + self.c + self.a * m ** (-self.b)

    def rmse(self, m) -> np.ndarray:
        return np.sqrt(self.mse(m))

    @property
    def floor(self) -> float:
        """RMSE that no number of samples goes below, √(σ_r² + c)."""
        return math.sqrt(self.floor_var + self.c)

    def size_for(self, rmse_target: float) -> float:
        """Smallest m with rmse(m) <= target (inf if the floor is above it)."""
        room = rmse_target ** 2 - self.floor_var - self.c
        if room <= 0:
            return math.inf
        if self.a <= 0:
            return 0.0
        return (self.a / room) ** (1.0 / self.b)


def _nnls_for_exponent(m, target, sw, b):
    """Best a, c >= 0 for fixed b (weighted); returns (a, c, weighted SSE)."""
    A = np.column_stack([m ** (-b), np.ones_like(m)]) * sw[:, None]
    coef, resid = optimize.nnls(A, target * sw)
    return float(coef[0]), float(coef[1]), float(resid ** 2)


def fit_power_law(sizes, mse, *, weights=None, floor_var: float = 0.0) -> PowerLaw:
    """Fit ``MSE(m) = floor_var + c + a·m^(−b)`` (a, c >= 0) by weighted least squares.

    Parameters
    ----------
    sizes : array-like
        Calibration sizes m (> 0), at least 3 distinct.
    mse : array-like
        Mean squared errors observed at those sizes.
    weights : array-like, optional
        Weights of the squared residuals (e.g. 1 / variance of each mean).
    floor_var : float
        σ_r², the part of every validation error due to the reference method.

    Returns
    -------
    PowerLaw
    """
    m = np.asarray(sizes, dtype=np.float64).ravel()
    y = np.asarray(mse, dtype=np.float64).ravel()
    if m.size != y.size or np.unique(m).size < 3:
        raise InputError("a learning curve needs errors at 3 or more distinct sizes",
                         field="sizes")
    if np.any(m <= 0) or not np.all(np.isfinite(y)):
        raise InputError("sizes must be > 0 and errors finite", field="sizes")
    w = np.ones_like(m) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if w.size != m.size or np.any(~np.isfinite(w)) or np.any(w < 0) or not np.any(w > 0):
        raise InputError("weights must be finite, >= 0 and not all 0", field="weights")
    floor_var = float(floor_var)
    if not math.isfinite(floor_var) or floor_var < 0:
        raise InputError("floor_var must be a finite value >= 0", field="floor_var")
    sw = np.sqrt(w / w.max())
    target = y - floor_var
    # rescale sizes so m^(-b) stays near 1 for every b searched
    scale = float(np.exp(np.mean(np.log(m))))
    ms = m / scale

    def sse(b):
        return _nnls_for_exponent(ms, target, sw, b)[2]

    lo, hi = EXPONENT_BOUNDS
    # a coarse grid first: the SSE in b can have more than one dip
    grid = np.geomspace(lo, hi, 40)
    values = np.array([sse(b) for b in grid])
    k = int(np.argmin(values))
    left, right = grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)]
    best = optimize.minimize_scalar(sse, bounds=(left, right), method="bounded",
                                    options={"xatol": 1e-6})
    b = float(best.x) if best.fun <= values[k] else float(grid[k])
    a_s, c, _ = _nnls_for_exponent(ms, target, sw, b)
    return PowerLaw(a=a_s * scale ** b, b=b, c=c, floor_var=floor_var)


# --------------------------------------------------------------- the curve
@dataclass(frozen=True)
class LearningCurve:
    """Cross-validated errors of subsampled calibrations.

    Attributes
    ----------
    sizes : ndarray (s,)
        Calibration sizes m (rows a model is fitted on).
    mse : ndarray (R, s)
        Repeat r's cross-validated MSE at size m: every calibration row is
        predicted once, by a model fitted on m rows of the other folds.
    fold_mse : ndarray (R, K, s)
        The MSE of each fold's model on its own held-out rows.
    fold_noise_var : ndarray (R, K, s)
        Sampling variance of each ``fold_mse`` from its held-out rows alone,
        var(e²)/n_fold.
    row_mse : ndarray (n, s)
        Each calibration row's squared error at size m, averaged over repeats
        (for the case-resampling bootstrap).
    method : str
    """

    sizes: np.ndarray
    mse: np.ndarray
    fold_mse: np.ndarray
    fold_noise_var: np.ndarray
    row_mse: np.ndarray
    method: str

    @property
    def mean_mse(self) -> np.ndarray:
        return self.mse.mean(axis=0)

    def weights(self) -> np.ndarray:
        """1 / squared standard error of each mean (repeats as replicates)."""
        r = self.mse.shape[0]
        var = self.mse.var(axis=0, ddof=1) / r if r > 1 else self.mean_mse ** 2
        # never trust one point far more than the others because its repeats agreed by chance
        var = np.maximum(var, 1e-3 * self.mean_mse ** 2 + 1e-300)
        return 1.0 / var

    def relative_model_scatter(self, floor_var: float = 0.0) -> float:
        """Relative SD of one calibration's model error about the curve.

        Over all fold models of one size, ``var(fold_mse) − mean(fold_noise_var)``
        is the spread left once the held-out rows' own sampling is taken out; its
        square root is taken relative to the model part of the error,
        ``mean(fold_mse) − floor_var`` (σ_r² does not vary between calibrations),
        pooled over sizes and capped at 1.
        """
        flat = self.fold_mse.reshape(-1, self.sizes.size)
        if flat.shape[0] < 2:
            return 0.0
        noise = self.fold_noise_var.reshape(-1, self.sizes.size).mean(axis=0)
        between = np.sqrt(np.maximum(flat.var(axis=0, ddof=1) - noise, 0.0))
        model_part = np.maximum(flat.mean(axis=0) - floor_var, 0.0)
        if model_part.sum() <= 0:
            return 0.0
        return float(min(1.0, between.sum() / model_part.sum()))


def _subset_order(method, rng, train, T):
    """Nested order of one fold's training rows."""
    shuffled = rng.permutation(train)
    if method == "random":
        return shuffled
    # half at random stands for the existing set, the rest follow in KS-augment order
    half = shuffled[: max(2, train.size // 2)]
    rest = shuffled[half.size:]
    if rest.size == 0:
        return shuffled
    picks = kennard_stone(T[shuffled], rest.size, already_selected=np.arange(half.size),
                          metric="mahalanobis", on_duplicates="allow")
    return np.concatenate([half, shuffled[picks]])


def learning_curve(X, y, n_components: int, *, sizes=None, n_repeats: int = 8,
                   folds: int = 5, method: str = "random", random_state=None) -> LearningCurve:
    """Cross-validated MSE of PLS models calibrated on growing subsets.

    Each repeat splits the rows at random into ``folds`` folds; for every
    fold the other folds' rows are put in ``method`` order and the first m of
    them calibrate a PLS model with ``min(n_components, m − 2)`` components,
    which predicts the held-out fold. At the largest size this is ordinary
    ``folds``-fold cross-validation.

    Parameters
    ----------
    X, y : arrays
        Preprocessed spectra and reference values of the calibration set.
    n_components : int
        PLS components of the model (fixed, as chosen for the full set).
    sizes : sequence of int, optional
        Subset sizes; default six sizes spaced geometrically from
        max(n_components + 3, a third of the training rows) to all of them.
    n_repeats, folds : int
    method : {"random", "kennard-stone"}
        ``"kennard-stone"``: half the training rows at random stand for the
        existing set and the rest follow in Kennard–Stone augment order
        (Mahalanobis, PCA space of the calibration set).
    random_state : None, int or Generator
    """
    X, y = check_xy(X, y)
    n = X.shape[0]
    n_components = check_count(n_components, "n_components")
    n_repeats = check_count(n_repeats, "n_repeats")
    folds = check_count(folds, "folds", minimum=2)
    if method not in CURVE_METHODS:
        raise InputError(f"method must be one of {', '.join(CURVE_METHODS)}", field="method")
    if folds > n:
        raise InputError(f"folds={folds} exceeds the {n} calibration samples", field="folds")
    n_train = n - int(math.ceil(n / folds))  # rows left by the largest fold
    low = n_components + 3
    if n_train < low + 2:
        need = int((low + 2) * folds / (folds - 1)) + 1
        raise InputError(f"{n} calibration samples are too few for a learning curve with "
                         f"{n_components} components (about {need} needed)", field="X")
    if sizes is None:
        start = max(low, n_train // 3)
        sizes = np.unique(np.round(np.geomspace(start, n_train, 6)).astype(int))
    sizes = np.asarray(sorted({check_count(int(s), "sizes") for s in sizes}), dtype=np.int64)
    if sizes[-1] > n_train or sizes[0] < 3:
        raise InputError(f"sizes must lie in 3..{n_train} (rows outside the largest fold)",
                         field="sizes")
    rng = np.random.default_rng(random_state)
    T = SelectionSpace().fit(X).transform(X) if method == "kennard-stone" else None
    mse = np.empty((n_repeats, sizes.size))
    fold_mse = np.empty((n_repeats, folds, sizes.size))
    fold_noise = np.empty_like(fold_mse)
    row_mse = np.zeros((n, sizes.size))
    with threadpool_limits(limits=1, user_api="blas"):
        for r in range(n_repeats):
            fold_of = rng.permutation(np.arange(n) % folds)
            e2 = np.empty((n, sizes.size))
            for f in range(folds):
                test = np.flatnonzero(fold_of == f)
                order = _subset_order(method, rng, np.flatnonzero(fold_of != f), T)
                for j, m in enumerate(sizes):
                    rows = order[:m]
                    a = max(1, min(n_components, int(m) - 2))
                    pred = PLSRegressor(n_components=a).fit(X[rows], y[rows]).predict(X[test])
                    e2[test, j] = (pred - y[test]) ** 2
                fold_mse[r, f] = e2[test].mean(axis=0)
                fold_noise[r, f] = e2[test].var(axis=0, ddof=1) / test.size
            mse[r] = e2.mean(axis=0)
            row_mse += e2 / n_repeats
    return LearningCurve(sizes=sizes, mse=mse, fold_mse=fold_mse, fold_noise_var=fold_noise,
                         row_mse=row_mse,
                         method=method)


# --------------------------------------------------------------- the forecast
@dataclass
class ErrorForecast:
    """What a number of further reference tests is expected to buy.

    ``as_dict()`` gives the plain shape for a command or a page:
    ``now`` {rmsecv, n, rmsep, low, high}; ``forecast`` [{added, cost, rmsep,
    low, high}, ...]; ``to_reach`` {target, added, cost} or None with
    ``to_reach_reason``; ``floor`` {rmsep, low, high, reached, reason}.
    """

    law: PowerLaw
    curve: LearningCurve
    n: int
    n_components: int
    n_pool: int
    rmsecv: float
    cost_per_test: float
    band: float
    rows: list[dict[str, float]]
    now: dict[str, float]
    floor: dict[str, Any]
    to_reach: dict[str, float] | None
    to_reach_reason: str
    n_validation: int | None = None
    boot_laws: list[PowerLaw] = field(repr=False, default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        return {"now": dict(self.now), "forecast": [dict(r) for r in self.rows],
                "to_reach": None if self.to_reach is None else dict(self.to_reach),
                "to_reach_reason": self.to_reach_reason, "floor": dict(self.floor),
                "band": self.band,
                "law": {"a": self.law.a, "b": self.law.b, "c": self.law.c,
                        "sigma_r": math.sqrt(self.law.floor_var)},
                "curve_method": self.curve.method, "n_components": self.n_components}

    def at(self, added: int) -> dict[str, float]:
        """The forecast row for ``added`` more tests (computed if not listed)."""
        for row in self.rows:
            if row["added"] == added:
                return dict(row)
        return _band_row(self, int(added))


def _predictive_rmse(laws, m, rel_model, n_validation, rng, draws_per_law=20):
    """Draws of the RMSE at size m.

    Each bootstrap curve's model part (MSE − σ_r²) is multiplied by a
    log-normal factor of mean 1 and relative SD ``rel_model`` (one calibration
    against the average one); with ``n_validation`` the whole MSE is then
    multiplied by a factor of relative variance 2/n_validation, the sampling
    scatter of a mean of n squared normal errors.
    """
    floor_var = laws[0].floor_var
    model = np.repeat([law.mse(m) - floor_var for law in laws], draws_per_law)
    mse = floor_var + model * _lognormal(rng, rel_model ** 2, model.size)
    if n_validation:
        mse = mse * _lognormal(rng, 2.0 / n_validation, mse.size)
    return np.sqrt(mse)


def _lognormal(rng, rel_var, size):
    """Log-normal factors with mean 1 and relative variance ``rel_var``."""
    if rel_var <= 0:
        return np.ones(size)
    s = math.sqrt(math.log1p(rel_var))
    return np.exp(s * rng.standard_normal(size) - s * s / 2)


def _band_row(fc: ErrorForecast, added: int) -> dict[str, float]:
    rng = np.random.default_rng(added)
    draws = _predictive_rmse(fc.boot_laws, fc.n + added,
                             fc.curve.relative_model_scatter(fc.law.floor_var), fc.n_validation,
                             rng)
    q = (1 - fc.band) / 2
    return {"added": added, "cost": added * fc.cost_per_test,
            "rmsep": float(fc.law.rmse(fc.n + added)),
            "low": float(np.quantile(draws, q)), "high": float(np.quantile(draws, 1 - q))}


def forecast_error(X_cal, y_cal, X_pool=None, *, n_components: int | None = None,
                   sigma_r: float | None = None, sigma_R: float | None = None,
                   target: float | None = None, cost_per_test: float = 1.0, steps=None,
                   method: str = "random", n_repeats: int = 8, n_boot: int = 200,
                   band: float = 0.8, n_validation: int | None = None,
                   random_state=None) -> ErrorForecast:
    """Forecast RMSEP after adding k reference-tested picks to a calibration set.

    Parameters
    ----------
    X_cal, y_cal : arrays
        Preprocessed spectra and reference values of the existing calibration.
    X_pool : array, optional
        The candidate pool; its size caps the number of picks (no cap if None).
    n_components : int, optional
        PLS components; chosen by 10-fold cross-validation (Haaland & Thomas
        1988 rule) on the calibration set if not given.
    sigma_r : float, optional
        Repeatability SD of the reference method, r/2.77 (ISO 5725-6): the
        floor of every validation error.
    sigma_R : float, optional
        Reproducibility SD, R/2.77; the default target is SEP <= σ_R.
    target : float, optional
        RMSEP to reach (overrides σ_R). RMSEP equals SEP when the bias is 0.
    cost_per_test : float
        Cost of the reference tests of one pick.
    steps : sequence of int, optional
        Numbers of added picks to forecast (default 5, 10, 20, 40, 80, 160,
        cut at the pool size).
    method : {"random", "kennard-stone"}
        How the learning-curve subsets are chosen (see :func:`learning_curve`).
    n_repeats, n_boot : int
        Subsampling repeats and bootstrap refits.
    band : float
        Central probability of the band (0.8 = 10th to 90th percentile).
    n_validation : int, optional
        Size of the validation set the realised RMSEP will be measured on;
        adds its sampling scatter to the band (None: the expected error).
    random_state : None, int or Generator

    Returns
    -------
    ErrorForecast
    """
    X, y = check_xy(X_cal, y_cal)
    n = X.shape[0]
    n_pool = None if X_pool is None else int(np.asarray(X_pool).shape[0])
    if not 0 < float(band) < 1:
        raise InputError("band must be between 0 and 1", field="band")
    for name, value in (("sigma_r", sigma_r), ("sigma_R", sigma_R), ("target", target)):
        if value is not None and (not math.isfinite(float(value)) or float(value) < 0):
            raise InputError(f"{name} must be a finite value >= 0", field=name)
    cost_per_test = float(cost_per_test)
    if not math.isfinite(cost_per_test) or cost_per_test < 0:
        raise InputError("cost_per_test must be finite and >= 0", field="cost_per_test")
    rng = np.random.default_rng(random_state)
    folds = min(10, n)
    with threadpool_limits(limits=1, user_api="blas"):
        if n_components is None:
            a_max = max(1, min(15, n - n // folds - 2))
            n_components = cross_validate_pls(X, y, a_max, folds=folds).selected_components
        a = check_count(int(n_components), "n_components")
        cv = cross_validate_pls(X, y, a, folds=folds, n_components=a)
    rmsecv = float(cv.rmsecv[a - 1])
    curve = learning_curve(X, y, a, n_repeats=n_repeats, method=method, random_state=rng)
    floor_var = float(sigma_r) ** 2 if sigma_r is not None else 0.0
    law = fit_power_law(curve.sizes, curve.mean_mse, weights=curve.weights(),
                        floor_var=floor_var)
    # case resampling: the calibration rows are a sample of production, so the
    # whole curve moves with the luck of that sample
    weights = curve.weights()
    boot = []
    for _ in range(check_count(n_boot, "n_boot")):
        rows = rng.integers(0, n, n)
        boot.append(fit_power_law(curve.sizes, curve.row_mse[rows].mean(axis=0),
                                  weights=weights, floor_var=floor_var))
    if steps is None:
        steps = [s for s in DEFAULT_STEPS if n_pool is None or s <= n_pool]
        if n_pool is not None and n_pool not in steps and n_pool < DEFAULT_STEPS[-1]:
            steps.append(n_pool)
    steps = sorted({check_count(int(s), "steps") for s in steps})
    if n_pool is not None and steps and steps[-1] > n_pool:
        raise InputError(f"steps go up to {steps[-1]} picks but the pool holds {n_pool}",
                         field="steps")
    fc = ErrorForecast(law=law, curve=curve, n=n, n_components=a,
                       n_pool=n_pool if n_pool is not None else -1,
                       rmsecv=rmsecv, cost_per_test=cost_per_test, band=float(band), rows=[],
                       now={}, floor={}, to_reach=None, to_reach_reason="",
                       n_validation=n_validation, boot_laws=boot)
    now_row = _band_row(fc, 0)
    fc.now = {"rmsecv": rmsecv, "n": n, "rmsep": now_row["rmsep"], "low": now_row["low"],
              "high": now_row["high"]}
    fc.rows = [_band_row(fc, k) for k in steps]
    floors = np.array([b.floor for b in boot])
    q = (1 - fc.band) / 2
    gain = (now_row["rmsep"] - law.floor) / now_row["rmsep"] if now_row["rmsep"] > 0 else 0.0
    reached = gain < WORTHWHILE_GAIN
    fc.floor = {
        "rmsep": law.floor, "low": float(np.quantile(floors, q)),
        "high": float(np.quantile(floors, 1 - q)), "reached": bool(reached),
        "reason": (f"the forecast floor {law.floor:.4g} is within {WORTHWHILE_GAIN:.0%} of the "
                   f"present {now_row['rmsep']:.4g}: more tests of this kind buy little"
                   if reached else
                   f"more tests can lower the expected RMSEP from {now_row['rmsep']:.4g} "
                   f"towards the floor {law.floor:.4g}")}
    fc.to_reach, fc.to_reach_reason = _to_reach(law, n, n_pool, cost_per_test,
                                                target if target is not None else sigma_R)
    return fc


def _to_reach(law: PowerLaw, n: int, n_pool, cost: float, target):
    if target is None:
        return None, "no target: give sigma_R (R/2.77) or a target RMSEP"
    target = float(target)
    m = law.size_for(target)
    if math.isinf(m):
        return None, (f"the target {target:.4g} lies below the forecast floor "
                      f"{law.floor:.4g}: no number of tests of this kind reaches it")
    added = max(0, int(math.ceil(m - 1e-9)) - n)
    if n_pool is not None and added > n_pool:
        return None, (f"about {added} more tests are needed but the pool holds only "
                      f"{n_pool} candidates")
    return ({"target": target, "added": added, "cost": added * cost},
            "reached now" if added == 0 else f"about {added} more tests")
