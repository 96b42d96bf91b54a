"""Prediction-time checks: is a spectrum inside the calibration model's space?

Four questions per sample, each answered with a value, a limit and a flag:

``leverage``
    h = t'(T'T)⁻¹t + 1/n (mean-centred model). An unknown is flagged when h
    exceeds the largest calibration leverage (it extrapolates beyond every
    calibration sample). Calibration samples are screened with the common
    practice limit 3A/n (``calibration_outliers_``).
``hotelling_t2``
    T² = t'S⁻¹t, S = T'T/(n−1), against the limit for a *new* observation
    A(n²−1)/(n(n−A))·F(conf; A, n−A) (Tracy, Young & Mason, J. Qual. Technol.
    24:88, 1992; from memory).
``q_residual``
    Q = ‖x − x̂‖², x̂ = x̄ + tP'. Limit by Jackson & Mudholkar (Technometrics
    21:341, 1979) with θᵢ = Σλⱼⁱ over the eigenvalues of the calibration
    residual covariance E'E/(n−1), obtained from the singular values of E:

        h0 = 1 − 2θ1θ3/(3θ2²)
        Q_lim = θ1·[z·√(2θ2h0²)/θ1 + 1 + θ2h0(h0−1)/θ1²]^(1/h0)

    with z the standard normal quantile at ``confidence``. The alternative
    F-ratio (``residual_test="f-ratio"``), ASTM E1655-style from memory:
    F = (n−A−1)·Q / ΣQ_cal against F(conf; 1, n−A−1). Both values are always
    reported; ``residual_test`` picks which one raises the flag.
``nearest_neighbour``
    smallest Mahalanobis distance (metric S⁻¹) from the sample's scores to
    any calibration sample's scores, against the largest nearest-neighbour
    distance within the calibration set (a sample in a gap of the space).
``y_range``
    the prediction lies outside [min y_cal, max y_cal].
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import linalg, stats

from registry.errors import InputError

FLAG_NAMES = ("leverage", "hotelling_t2", "q_residual", "nearest_neighbour", "y_range")
RESIDUAL_TESTS = ("jackson-mudholkar", "f-ratio")
_BLOCK = 1024  # rows per distance block: bounded memory for large sets


def jackson_mudholkar_limit(eigenvalues: np.ndarray, confidence: float) -> float:
    """Q limit of Jackson & Mudholkar (1979) from residual-covariance eigenvalues."""
    lam = np.asarray(eigenvalues, dtype=np.float64)
    theta1, theta2, theta3 = (float(np.sum(lam ** i)) for i in (1, 2, 3))
    if theta1 <= 0.0:
        return 0.0
    h0 = 1.0 - 2.0 * theta1 * theta3 / (3.0 * theta2 ** 2)
    z = stats.norm.ppf(confidence)
    base = z * np.sqrt(2.0 * theta2 * h0 ** 2) / theta1 + 1.0 + theta2 * h0 * (h0 - 1.0) / theta1 ** 2
    return float(theta1 * base ** (1.0 / h0))


def _nearest_distance(Z: np.ndarray, Z_cal: np.ndarray, exclude_self: bool = False) -> np.ndarray:
    """Euclidean distance from each row of Z to its nearest row of Z_cal."""
    out = np.empty(Z.shape[0])
    cal_sq = np.einsum("ij,ij->i", Z_cal, Z_cal)
    for start in range(0, Z.shape[0], _BLOCK):
        block = Z[start:start + _BLOCK]
        d2 = (np.einsum("ij,ij->i", block, block)[:, None] + cal_sq[None, :]
              - 2.0 * block @ Z_cal.T)
        if exclude_self:
            rows = np.arange(block.shape[0])
            d2[rows, start + rows] = np.inf
        out[start:start + _BLOCK] = np.sqrt(np.maximum(d2.min(axis=1), 0.0))
    return out


@dataclass
class DiagnosticsResult:
    """Per-sample values, limits and flags from :meth:`ApplicabilityDomain.assess`."""

    leverage: np.ndarray
    leverage_limit: float
    t2: np.ndarray
    t2_limit: float
    q: np.ndarray
    q_limit: float
    q_f_ratio: np.ndarray
    q_f_limit: float
    nn_distance: np.ndarray
    nn_limit: float
    y_pred: np.ndarray
    y_min: float
    y_max: float
    flags: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def n_samples(self) -> int:
        return int(self.leverage.shape[0])

    @property
    def any_flag(self) -> np.ndarray:
        return np.any(np.stack([self.flags[k] for k in FLAG_NAMES]), axis=0)

    def flag_names(self, i: int) -> list[str]:
        """Names of the checks sample ``i`` failed, in a fixed order."""
        return [k for k in FLAG_NAMES if bool(self.flags[k][i])]

    def flag_lists(self) -> list[list[str]]:
        return [self.flag_names(i) for i in range(self.n_samples)]

    def records(self) -> list[dict[str, Any]]:
        """One plain dict per sample (values, limits, flag names)."""
        return [{
            "leverage": float(self.leverage[i]), "leverage_limit": self.leverage_limit,
            "t2": float(self.t2[i]), "t2_limit": self.t2_limit,
            "q": float(self.q[i]), "q_limit": self.q_limit,
            "q_f_ratio": float(self.q_f_ratio[i]), "q_f_limit": self.q_f_limit,
            "nn_distance": float(self.nn_distance[i]), "nn_limit": self.nn_limit,
            "y_pred": float(self.y_pred[i]), "y_min": self.y_min, "y_max": self.y_max,
            "flags": self.flag_names(i),
        } for i in range(self.n_samples)]


class ApplicabilityDomain:
    """Calibration-space model for prediction-time checks.

    Parameters
    ----------
    confidence : float, default 0.95
        Level of the T², Q and F-ratio limits (0.99 is the usual stricter choice).
    n_components : int, optional
        Components of the PLS model to use (default: all it has; never more
        than its numerically stable ones).
    residual_test : {"jackson-mudholkar", "f-ratio"}
        Which residual limit raises the ``q_residual`` flag.

    Attributes
    ----------
    x_mean_, x_rotations_, x_loadings_ : ndarray
        Projection of the PLS model (first ``n_components_`` columns).
    scores_cov_ : ndarray (A, A)
        S = T'T/(n−1) of the calibration scores.
    whitening_ : ndarray (A, A)
        L⁻¹ with S = LL' (Cholesky); ‖L⁻¹(a−b)‖ is the Mahalanobis distance.
    calibration_whitened_ : ndarray (n, A)
    calibration_leverage_, calibration_t2_, calibration_q_ : ndarray (n,)
    calibration_outliers_ : ndarray of bool (n,)
        Leverage above 3A/n (common practice).
    residual_eigenvalues_ : ndarray
    leverage_limit_, t2_limit_, q_limit_, q_f_limit_, nn_limit_ : float
    q_sum_ : float
    y_min_, y_max_ : float
    n_samples_, n_components_ : int
    """

    def __init__(self, confidence: float = 0.95, n_components: int | None = None,
                 residual_test: str = "jackson-mudholkar"):
        self.confidence = confidence
        self.n_components = n_components
        self.residual_test = residual_test

    def _check_params(self):
        if not 0.5 <= float(self.confidence) < 1.0:
            raise InputError(f"confidence must be in [0.5, 1), got {self.confidence!r}",
                             field="confidence")
        if self.residual_test not in RESIDUAL_TESTS:
            raise InputError(f"residual_test must be one of {', '.join(RESIDUAL_TESTS)}",
                             field="residual_test")

    def fit(self, X_pre, model, y) -> "ApplicabilityDomain":
        """Learn the calibration space from preprocessed spectra and a fitted PLS.

        Parameters
        ----------
        X_pre : ndarray (n, k)
            Preprocessed calibration spectra (those the model was fitted on).
        model : PLSRegressor
            Fitted model; its mean, rotations and loadings are copied.
        y : ndarray (n,)
            Calibration reference values (for the y range).
        """
        self._check_params()
        X = np.asarray(X_pre, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64).reshape(-1)
        A = model.coef_.shape[0] if self.n_components is None else int(self.n_components)
        n = X.shape[0]
        if not 1 <= A <= model.coef_.shape[0]:
            raise InputError(f"n_components must be between 1 and {model.coef_.shape[0]}",
                             field="n_components")
        # components past the numerical rank of X have zero scores and
        # loadings (ikpls); they add nothing to the space and would make the
        # score covariance singular, so the checks use the stable ones only
        A = min(A, int(getattr(model, "n_stable_components_", A)))
        if n <= A + 1:
            raise InputError(f"need more than A + 1 = {A + 1} calibration samples, got {n}",
                             field="X")
        if y.shape[0] != n:
            raise InputError(f"X has {n} rows but y has {y.shape[0]} values", field="y")
        self.x_mean_ = np.ascontiguousarray(model.x_mean_)
        self.x_rotations_ = np.ascontiguousarray(model.x_rotations_[:, :A])
        self.x_loadings_ = np.ascontiguousarray(model.x_loadings_[:, :A])
        Xc = X - self.x_mean_
        T = Xc @ self.x_rotations_
        E = Xc - T @ self.x_loadings_.T
        self.n_samples_, self.n_components_ = n, A
        self.scores_cov_ = T.T @ T / (n - 1)
        chol = linalg.cholesky(self.scores_cov_, lower=True)
        self.whitening_ = linalg.solve_triangular(chol, np.eye(A), lower=True)
        self.calibration_whitened_ = np.ascontiguousarray(T @ self.whitening_.T)
        # singular values of E give the eigenvalues of E'E/(n-1) without a k×k matrix
        s = linalg.svd(E, compute_uv=False, check_finite=False)
        self.residual_eigenvalues_ = s ** 2 / (n - 1)
        self.y_min_, self.y_max_ = float(y.min()), float(y.max())
        self.q_sum_ = float(np.einsum("ij,ij->", E, E))
        self._set_limits()
        self.calibration_t2_ = np.einsum("ij,ij->i", self.calibration_whitened_,
                                         self.calibration_whitened_)
        self.calibration_leverage_ = self.calibration_t2_ / (n - 1) + 1.0 / n
        self.calibration_q_ = np.einsum("ij,ij->i", E, E)
        self.calibration_outliers_ = self.calibration_leverage_ > 3.0 * A / n
        self.leverage_limit_ = float(self.calibration_leverage_.max())
        self.nn_limit_ = float(_nearest_distance(self.calibration_whitened_,
                                                 self.calibration_whitened_,
                                                 exclude_self=True).max())
        return self

    def _set_limits(self):
        n, A, conf = self.n_samples_, self.n_components_, float(self.confidence)
        self.t2_limit_ = float(A * (n * n - 1) / (n * (n - A)) * stats.f.ppf(conf, A, n - A))
        self.q_limit_ = jackson_mudholkar_limit(self.residual_eigenvalues_, conf)
        self.q_f_limit_ = float(stats.f.ppf(conf, 1, n - A - 1))

    def assess(self, X_pre, y_pred) -> DiagnosticsResult:
        """Values, limits and flags for preprocessed spectra and their predictions."""
        X = np.asarray(X_pre, dtype=np.float64)
        y_pred = np.asarray(y_pred, dtype=np.float64).reshape(-1)
        if X.ndim != 2 or X.shape[1] != self.x_mean_.shape[0]:
            raise InputError(f"spectra must have {self.x_mean_.shape[0]} preprocessed points",
                             field="X")
        if y_pred.shape[0] != X.shape[0]:
            raise InputError("one prediction per spectrum is needed", field="y_pred")
        n, A = self.n_samples_, self.n_components_
        Xc = X - self.x_mean_
        T = Xc @ self.x_rotations_
        E = Xc - T @ self.x_loadings_.T
        Z = T @ self.whitening_.T
        t2 = np.einsum("ij,ij->i", Z, Z)
        leverage = t2 / (n - 1) + 1.0 / n
        q = np.einsum("ij,ij->i", E, E)
        q_f = (n - A - 1) * q / self.q_sum_ if self.q_sum_ > 0 else np.full_like(q, np.inf)
        nn = _nearest_distance(Z, self.calibration_whitened_)
        q_flag = q > self.q_limit_ if self.residual_test == "jackson-mudholkar" else q_f > self.q_f_limit_
        flags = {
            "leverage": leverage > self.leverage_limit_,
            "hotelling_t2": t2 > self.t2_limit_,
            "q_residual": q_flag,
            "nearest_neighbour": nn > self.nn_limit_,
            "y_range": (y_pred < self.y_min_) | (y_pred > self.y_max_),
        }
        return DiagnosticsResult(
            leverage=leverage, leverage_limit=self.leverage_limit_, t2=t2,
            t2_limit=self.t2_limit_, q=q, q_limit=self.q_limit_, q_f_ratio=q_f,
            q_f_limit=self.q_f_limit_, nn_distance=nn, nn_limit=self.nn_limit_,
            y_pred=y_pred, y_min=self.y_min_, y_max=self.y_max_, flags=flags)

    # ----------------------------------------------------------- plain state
    _ARRAYS = ("x_mean_", "x_rotations_", "x_loadings_", "scores_cov_", "whitening_",
               "calibration_whitened_", "residual_eigenvalues_", "calibration_leverage_",
               "calibration_t2_", "calibration_q_")
    _SCALARS = ("leverage_limit_", "t2_limit_", "q_limit_", "q_f_limit_", "nn_limit_",
                "q_sum_", "y_min_", "y_max_")

    def state_arrays(self) -> dict[str, np.ndarray]:
        return {name[:-1]: np.ascontiguousarray(getattr(self, name)) for name in self._ARRAYS}

    def state_json(self) -> dict[str, Any]:
        # json writes floats with repr, which round-trips float64 exactly
        out: dict[str, Any] = {name[:-1]: float(getattr(self, name)) for name in self._SCALARS}
        out.update(confidence=float(self.confidence), residual_test=self.residual_test,
                   n_samples=self.n_samples_, n_components=self.n_components_)
        return out

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> "ApplicabilityDomain":
        ad = cls(confidence=meta["confidence"], n_components=meta["n_components"],
                 residual_test=meta["residual_test"])
        ad._check_params()
        for name in cls._ARRAYS:
            key = name[:-1]
            if key not in arrays:
                raise InputError(f"diagnostics state is missing array {key!r}", field=key)
            setattr(ad, name, np.ascontiguousarray(arrays[key], dtype=np.float64))
        for name in cls._SCALARS:
            setattr(ad, name, float(meta[name[:-1]]))
        ad.n_samples_, ad.n_components_ = int(meta["n_samples"]), int(meta["n_components"])
        ad.calibration_outliers_ = ad.calibration_leverage_ > 3.0 * ad.n_components_ / ad.n_samples_
        return ad
