"""Prediction-time checks: is a spectrum inside the calibration model's space?

Four questions per sample, each answered with a value, a limit and a flag:

``leverage``
    h = t'(T'T)⁻¹t + 1/n (mean-centred model). An unknown is flagged when h
    exceeds the largest calibration leverage (it extrapolates beyond every
    calibration sample). The calibration leverages are the diagonal of the
    hat matrix H = 11'/n + T(T'T)⁻¹T', whose trace is A + 1, so their mean
    is (A + 1)/n; calibration samples are screened at three times that mean,
    3(A + 1)/n (ASTM E1655 counts the mean as a fitted parameter; from
    memory) (``calibration_outliers_``).
``hotelling_t2``
    T² = t'S⁻¹t, S = T'T/(n−1), against the limit for a *new* observation
    A(n²−1)/(n(n−A))·F(conf; A, n−A) (Tracy, Young & Mason, J. Qual. Technol.
    24:88, 1992; from memory).
``q_residual``
    Q = ‖x − x̂‖², x̂ = x̄ + tP'. Q of a new sample is a quadratic form in
    (nearly) normal residuals, Q ≈ Σλⱼzⱼ², with θᵢ = Σλⱼⁱ over the
    eigenvalues λⱼ of a new sample's residual covariance.

    *Which residuals.* The loadings P = X_c'T(T'T)⁻¹ are the least-squares
    regression of every wavelength on the scores, so the calibration
    residual E = X_c − TP' is a regression residual with hat matrix H
    above: its expected sum of squares is (n − A − 1)·tr Σ_res, and a new
    sample's residual carries the extra variance of the estimated mean and
    loadings, on average (1 + (A + 1)/n)·tr Σ_res (fitted residual variance
    σ²(1 − hᵢ), prediction residual σ²(1 + h₀): Draper & Smith, Applied
    Regression Analysis, 3rd ed., 1998, from memory). The eigenvalues used
    are therefore those of the fitted residuals scaled for the fitted
    degrees of freedom,

        λⱼ = sⱼ²/(n − A − 1) · (1 + (A + 1)/n),   sⱼ the singular values of E

    (``q_residual_scale_`` = that factor relative to E'E/(n − 1), which is
    what ``residual_eigenvalues_`` holds). Unscaled fitted residuals
    understate new samples' Q, by more the more components are fitted.

    *Which form.* ``q_limit_method="box"`` (default): Q ≈ g·χ²(h) with
    g = θ2/θ1, h = θ1²/θ2 (Box, Ann. Math. Stat. 25:290, 1954), which holds
    for any eigenvalue spectrum. ``"jackson-mudholkar"`` (Jackson &
    Mudholkar, Technometrics 21:341, 1979)

        h0 = 1 − 2θ1θ3/(3θ2²)
        Q_lim = θ1·[z·√(2θ2h0²)/θ1 + 1 + θ2h0(h0−1)/θ1²]^(1/h0)

    is only valid for h0 > 0, and the power 1/h0 becomes unstable as h0
    approaches 0. Mid-IR residual spaces have a long tail of small
    eigenvalues, and h0 is often ≤ 0 at the component counts cross-validation
    picks; the formula then puts the limit below the typical Q. It is used only when
    h0 ≥ ``JM_MIN_H0`` (our choice); otherwise Box is used and
    ``q_limit_note_`` says so. ``q_limit_form_`` records the form used.

    The alternative F-ratio (``residual_test="f-ratio"``), ASTM E1655-style
    from memory: F = (n−A−1)·Q / ΣQ_cal against F(conf; 1, n−A−1). Both
    values are always reported; ``residual_test`` picks which one raises
    the flag.
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
#: Each check in words, with the :class:`DiagnosticsResult` value and limit it compares
#: (``y_range`` compares the prediction with [y_min, y_max]).
CHECK_WORDS = {
    "leverage": ("leverage", "leverage", "leverage_limit"),
    "hotelling_t2": ("Hotelling T²", "t2", "t2_limit"),
    "q_residual": ("Q residual", "q", "q_limit"),
    "nearest_neighbour": ("nearest-neighbour distance", "nn_distance", "nn_limit"),
    "y_range": ("prediction outside the calibration range", "y_pred", None),
}
RESIDUAL_TESTS = ("q-limit", "f-ratio")
#: artifacts written before the Q-limit form was recorded named the Q test after its form
_LEGACY_RESIDUAL_TESTS = {"jackson-mudholkar": "q-limit"}
Q_LIMIT_METHODS = ("box", "jackson-mudholkar")
#: smallest h0 at which the Jackson–Mudholkar form is used (our choice: below it the
#: power 1/h0 magnifies small errors in θ; h0 is at most 1/3, for equal eigenvalues)
JM_MIN_H0 = 0.1
#: where the eigenvalues behind a Q limit came from
THETA_SCALED = "calibration residuals scaled for fitted degrees of freedom"
THETA_UNSCALED = "fitted calibration residuals, unscaled"
_BLOCK = 1024  # rows per distance block: bounded memory for large sets


def residual_thetas(eigenvalues: np.ndarray) -> tuple[float, float, float]:
    """θᵢ = Σλⱼⁱ, i = 1, 2, 3, of residual-covariance eigenvalues."""
    lam = np.asarray(eigenvalues, dtype=np.float64)
    return tuple(float(np.sum(lam ** i)) for i in (1, 2, 3))  # type: ignore[return-value]


def jackson_mudholkar_h0(eigenvalues: np.ndarray) -> float:
    """h0 = 1 − 2θ1θ3/(3θ2²) (Jackson & Mudholkar 1979); NaN without residual."""
    theta1, theta2, theta3 = residual_thetas(eigenvalues)
    return 1.0 - 2.0 * theta1 * theta3 / (3.0 * theta2 ** 2) if theta2 > 0 else float("nan")


def box_limit(eigenvalues: np.ndarray, confidence: float) -> float:
    """Q limit g·χ²(conf; h), g = θ2/θ1, h = θ1²/θ2 (Box, Ann. Math. Stat. 25:290, 1954)."""
    theta1, theta2, _ = residual_thetas(eigenvalues)
    if theta1 <= 0.0:
        return 0.0
    return float(theta2 / theta1 * stats.chi2.ppf(confidence, theta1 ** 2 / theta2))


def jackson_mudholkar_limit(eigenvalues: np.ndarray, confidence: float) -> float:
    """Q limit of Jackson & Mudholkar (1979) from residual-covariance eigenvalues.

    Raises
    ------
    InputError
        h0 ≤ 0, where the approximation does not hold (use :func:`box_limit`).
    """
    theta1, theta2, _ = residual_thetas(eigenvalues)
    if theta1 <= 0.0:
        return 0.0
    h0 = jackson_mudholkar_h0(eigenvalues)
    if not h0 > 0.0:
        raise InputError(f"Jackson-Mudholkar needs h0 > 0, got h0 = {h0:.3g}; use the Box form",
                         field="q_limit_method")
    z = stats.norm.ppf(confidence)
    base = z * np.sqrt(2.0 * theta2 * h0 ** 2) / theta1 + 1.0 + theta2 * h0 * (h0 - 1.0) / theta1 ** 2
    return float(theta1 * base ** (1.0 / h0))


def hotelling_t2_limit(n_samples: int, n_components: int, confidence: float) -> float:
    """Hotelling T² limit of a *new* observation against n calibration rows and A scores,
    A(n² − 1)/(n(n − A)) · F(A, n − A) at ``confidence`` (Tracy, Young & Mason, J. Qual.
    Technol. 24:88, 1992; Jackson, A User's Guide to Principal Components, 1991)."""
    n, A = int(n_samples), int(n_components)
    return float(A * (n * n - 1) / (n * (n - A)) * stats.f.ppf(float(confidence), A, n - A))


def new_sample_residual_scale(n_samples: int, n_components: int) -> float:
    """Factor from E'E/(n−1) to a new sample's residual covariance:
    (n−1)/(n−A−1)·(1 + (A+1)/n) (see the module notes)."""
    n, A = int(n_samples), int(n_components)
    return (n - 1) / (n - A - 1) * (1.0 + (A + 1) / n)


_FORM_TEXT = {"box": "Box g·χ²(h)", "jackson-mudholkar": "Jackson–Mudholkar"}


def describe_q_limit(record: dict[str, Any] | None) -> str:
    """One line for people: the form, its parameters, where θ came from and any note,
    from :meth:`ApplicabilityDomain.q_limit_record`."""
    if not record:
        return "not recorded (artifact unreadable)"

    def num(v: Any) -> str:
        return "-" if v is None else f"{v:.3g}"
    form = record.get("form")
    text = f"{_FORM_TEXT.get(form, form)} at {100 * record['confidence']:g} %"
    if form == "box":
        text += f": g = {num(record.get('g'))}, h = {num(record.get('h'))} (h0 = {num(record.get('h0'))})"
    else:
        text += f": h0 = {num(record.get('h0'))}"
    text += f"; θ from {record.get('theta_source')}"
    if record.get("residual_scale") not in (None, 1.0):
        text += f" (×{record['residual_scale']:.4g})"
    if record.get("note"):
        text += f"; {record['note']}"
    if record.get("residual_test") == "f-ratio":
        text += "; the flag uses the F-ratio test instead"
    return text


def outlier_leverage_limit(n_samples: int, n_components: int) -> float:
    """3(A+1)/n: three times the mean leverage of a mean-centred model (ASTM E1655, from memory)."""
    return 3.0 * (int(n_components) + 1) / int(n_samples)


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
    residual_test : {"q-limit", "f-ratio"}
        Which residual limit raises the ``q_residual`` flag.
    q_limit_method : {"box", "jackson-mudholkar"}
        Form of the Q limit; Jackson–Mudholkar is used only where
        h0 ≥ ``JM_MIN_H0``, Box otherwise (see the module notes).

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
        Leverage above 3(A+1)/n, three times the mean leverage.
    residual_eigenvalues_ : ndarray
        Eigenvalues of E'E/(n−1) of the fitted calibration residuals.
    q_residual_scale_ : float
        Factor applied to them for the Q limit (1.0 in artifacts written
        before it existed).
    q_limit_form_ : str
        Form the Q limit was computed with ("box" or "jackson-mudholkar").
    q_limit_h0_, q_limit_g_, q_limit_h_ : float
        h0 of Jackson–Mudholkar and Box's g and h, from the eigenvalues used.
    q_theta_source_, q_limit_note_ : str
        Where θ came from; any caveat (Box used instead of Jackson–Mudholkar,
        an artifact older than the recorded form).
    leverage_limit_, t2_limit_, q_limit_, q_f_limit_, nn_limit_ : float
    q_sum_ : float
    y_min_, y_max_ : float
    n_samples_, n_components_ : int
    """

    def __init__(self, confidence: float = 0.95, n_components: int | None = None,
                 residual_test: str = "q-limit", q_limit_method: str = "box"):
        self.confidence = confidence
        self.n_components = n_components
        self.residual_test = residual_test
        self.q_limit_method = q_limit_method

    def _check_params(self):
        if not 0.5 <= float(self.confidence) < 1.0:
            raise InputError(f"confidence must be in [0.5, 1), got {self.confidence!r}",
                             field="confidence")
        if self.residual_test not in RESIDUAL_TESTS:
            raise InputError(f"residual_test must be one of {', '.join(RESIDUAL_TESTS)}",
                             field="residual_test")
        if self.q_limit_method not in Q_LIMIT_METHODS:
            raise InputError(f"q_limit_method must be one of {', '.join(Q_LIMIT_METHODS)}",
                             field="q_limit_method")

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
        self.calibration_outliers_ = self.calibration_leverage_ > outlier_leverage_limit(n, A)
        self.leverage_limit_ = float(self.calibration_leverage_.max())
        self.nn_limit_ = float(_nearest_distance(self.calibration_whitened_,
                                                 self.calibration_whitened_,
                                                 exclude_self=True).max())
        return self

    def _set_limits(self):
        n, A, conf = self.n_samples_, self.n_components_, float(self.confidence)
        self.t2_limit_ = hotelling_t2_limit(n, A, conf)
        self.q_f_limit_ = float(stats.f.ppf(conf, 1, n - A - 1))
        self.q_residual_scale_ = new_sample_residual_scale(n, A)
        self.q_theta_source_ = THETA_SCALED
        lam = self.residual_eigenvalues_ * self.q_residual_scale_
        self._describe_q_limit(lam)
        self.q_limit_note_ = ""
        if self.q_limit_method == "jackson-mudholkar" and self.q_limit_h0_ >= JM_MIN_H0:
            self.q_limit_form_ = "jackson-mudholkar"
            self.q_limit_ = jackson_mudholkar_limit(lam, conf)
        else:
            if self.q_limit_method == "jackson-mudholkar":
                self.q_limit_note_ = (f"Jackson-Mudholkar asked for, but h0 = {self.q_limit_h0_:.3g} "
                                      f"< {JM_MIN_H0}: Box form used")
            self.q_limit_form_ = "box"
            self.q_limit_ = box_limit(lam, conf)

    def _describe_q_limit(self, eigenvalues: np.ndarray) -> None:
        theta1, theta2, _ = residual_thetas(eigenvalues)
        self.q_limit_h0_ = jackson_mudholkar_h0(eigenvalues)
        self.q_limit_g_ = theta2 / theta1 if theta1 > 0 else float("nan")
        self.q_limit_h_ = theta1 ** 2 / theta2 if theta2 > 0 else float("nan")

    def q_limit_record(self) -> dict[str, Any]:
        """How the Q limit was obtained, as plain JSON (for the trace and the model page)."""
        def num(v: float) -> float | None:
            return float(v) if np.isfinite(v) else None
        return {"form": self.q_limit_form_, "confidence": float(self.confidence),
                "limit": num(self.q_limit_), "h0": num(self.q_limit_h0_), "g": num(self.q_limit_g_),
                "h": num(self.q_limit_h_), "theta_source": self.q_theta_source_,
                "residual_scale": num(self.q_residual_scale_), "note": self.q_limit_note_,
                "residual_test": self.residual_test}

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
        Z = self._whiten(T)
        t2 = np.einsum("ij,ij->i", Z, Z)
        leverage = t2 / (n - 1) + 1.0 / n
        q = np.einsum("ij,ij->i", E, E)
        q_f = (n - A - 1) * q / self.q_sum_ if self.q_sum_ > 0 else np.full_like(q, np.inf)
        nn = _nearest_distance(Z, self.calibration_whitened_)
        q_flag = q > self.q_limit_ if self.residual_test == "q-limit" else q_f > self.q_f_limit_
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

    def _whiten(self, T: np.ndarray) -> np.ndarray:
        return T @ self.whitening_.T

    def whitened_scores(self, X_pre) -> np.ndarray:
        """Scores of preprocessed spectra scaled to unit calibration covariance: the space
        of the T² and nearest-neighbour checks (Euclidean distance there is Mahalanobis
        distance on the scores)."""
        X = np.asarray(X_pre, dtype=np.float64)
        return self._whiten((X - self.x_mean_) @ self.x_rotations_)

    # ----------------------------------------------------------- plain state
    _ARRAYS = ("x_mean_", "x_rotations_", "x_loadings_", "scores_cov_", "whitening_",
               "calibration_whitened_", "residual_eigenvalues_", "calibration_leverage_",
               "calibration_t2_", "calibration_q_")
    _SCALARS = ("leverage_limit_", "t2_limit_", "q_limit_", "q_f_limit_", "nn_limit_",
                "q_sum_", "y_min_", "y_max_")
    _Q_LIMIT_TEXT = ("q_limit_form_", "q_theta_source_", "q_limit_note_")

    def state_arrays(self) -> dict[str, np.ndarray]:
        return {name[:-1]: np.ascontiguousarray(getattr(self, name)) for name in self._ARRAYS}

    def state_json(self) -> dict[str, Any]:
        # json writes floats with repr, which round-trips float64 exactly
        out: dict[str, Any] = {name[:-1]: float(getattr(self, name)) for name in self._SCALARS}
        out.update(confidence=float(self.confidence), residual_test=self.residual_test,
                   q_limit_method=self.q_limit_method, q_residual_scale=float(self.q_residual_scale_),
                   n_samples=self.n_samples_, n_components=self.n_components_)
        out.update({name[:-1]: getattr(self, name) for name in self._Q_LIMIT_TEXT})
        return out

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> "ApplicabilityDomain":
        test = meta["residual_test"]
        ad = cls(confidence=meta["confidence"], n_components=meta["n_components"],
                 residual_test=_LEGACY_RESIDUAL_TESTS.get(test, test),
                 q_limit_method=meta.get("q_limit_method", "jackson-mudholkar"))
        ad._check_params()
        for name in cls._ARRAYS:
            key = name[:-1]
            if key not in arrays:
                raise InputError(f"diagnostics state is missing array {key!r}", field=key)
            setattr(ad, name, np.ascontiguousarray(arrays[key], dtype=np.float64))
        for name in cls._SCALARS:
            setattr(ad, name, float(meta[name[:-1]]))
        ad.n_samples_, ad.n_components_ = int(meta["n_samples"]), int(meta["n_components"])
        if "q_limit_form" in meta:
            ad.q_residual_scale_ = float(meta["q_residual_scale"])
            for name in cls._Q_LIMIT_TEXT:
                setattr(ad, name, str(meta[name[:-1]]))
        else:
            # written before the form was recorded: the stored limit is Jackson–Mudholkar on
            # the unscaled fitted residuals; it is kept (same flags) and described as such
            ad.q_residual_scale_, ad.q_limit_form_ = 1.0, "jackson-mudholkar"
            ad.q_theta_source_ = THETA_UNSCALED
            ad.q_limit_note_ = "stored before the limit form was recorded; form assumed"
        ad._describe_q_limit(ad.residual_eigenvalues_ * ad.q_residual_scale_)
        if ad.q_limit_form_ == "jackson-mudholkar" and not ad.q_limit_h0_ > 0:
            ad.q_limit_note_ = "; ".join(filter(None, [
                ad.q_limit_note_, f"h0 = {ad.q_limit_h0_:.3g} <= 0: this limit is not valid"]))
        ad.calibration_outliers_ = ad.calibration_leverage_ > outlier_leverage_limit(
            ad.n_samples_, ad.n_components_)
        return ad
