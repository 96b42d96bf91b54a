"""Classical least squares (K-matrix) calibration.

Beer–Lambert for mixtures, X = C·K: each spectrum x (p,) is the sum of the
pure-component spectra (rows of K, m × p) weighted by the concentrations c (m,)
(Haaland & Easterling, Appl. Spectrosc. 34:539, 1980). K is either given
(pure-component reference spectra) or estimated from calibration mixtures of
known composition, K = C⁺X. Concentrations of a new spectrum are the least
squares solution of x ≈ cK, or the non-negative one (Lawson & Hanson,
*Solving Least Squares Problems*, 1974, via :func:`scipy.optimize.nnls`).

Optional baseline term: x ≈ cK + bG with G the rows of a constant (``offset``)
or a constant and a straight line over the axis (``linear``); b is free in
sign. Because b is unconstrained, the fit equals the fit of the spectra and K
projected onto the complement of G's rows (Frisch–Waugh–Lovell theorem), which
is how it is computed; the same projection is applied when K is estimated, so
the part of K a baseline could explain is not attributed to a component.

Prediction-time checks (:meth:`ClassicalLeastSquares.check`):

``residual``
    Q = ‖x − ĉK − b̂G‖² against Box's g·χ²(h) limit
    (:func:`~registry.chemometrics.families.residual_limit.box_residual_limit`)
    with g and h from the mean and variance of the Q values of residuals
    that stand for new samples (Nomikos & MacGregor, Technometrics 37:41,
    1995): leave-one-out residuals of the calibration mixtures when K is
    estimated (each mixture fitted with the K of the others), the residuals
    of the calibration spectra when K is given (K was not fitted on them).
    The moments are taken from the Q values, not from the eigenvalues of
    E'E/n: with fewer spectra than points, Σλ² of that matrix is biased
    upwards by about (Σλ)²/n (Wishart moments), which widens the limit far
    beyond its confidence.
``condition``
    the 2-norm condition number of K (after the baseline projection, each row
    scaled to unit length so the concentration units do not change it)
    above ``condition_limit``. Belsley, Kuh & Welsch (*Regression
    Diagnostics*, Wiley 1980) read condition indexes of unit-length-scaled
    columns above 30 as moderate to strong collinearity (from memory).
"""

from __future__ import annotations

import numbers
from typing import Any

import numpy as np
from scipy.optimize import nnls

from registry.chemometrics.families._state import take_arrays
from registry.chemometrics.families.checks import FamilyChecks
from registry.chemometrics.families.residual_limit import box_residual_limit
from registry.chemometrics.pls import check_xy
from registry.errors import InputError

BASELINES = ("none", "offset", "linear")
FLAGS = ("residual", "condition")
DEFAULT_CONDITION_LIMIT = 30.0


def baseline_basis(kind: str, n_points: int, axis=None) -> np.ndarray:
    """Rows spanning the baseline term: none, a constant, or a constant and a line.

    The line is the axis scaled to [−1, 1] (the column index when no axis is
    given), which keeps the basis well conditioned.
    """
    if kind not in BASELINES:
        raise InputError(f"baseline must be one of {', '.join(BASELINES)}", field="baseline")
    if kind == "none":
        return np.zeros((0, n_points))
    rows = [np.ones(n_points)]
    if kind == "linear":
        x = np.arange(n_points, dtype=np.float64) if axis is None else np.asarray(axis, np.float64)
        if x.shape != (n_points,) or not np.all(np.isfinite(x)):
            raise InputError(f"axis must have {n_points} finite values", field="axis")
        half = (x.max() - x.min()) / 2.0
        if half <= 0:
            raise InputError("axis has no extent", field="axis")
        rows.append((x - (x.max() + x.min()) / 2.0) / half)
    return np.array(rows)


class _Projection:
    """Removes the span of the baseline rows G from spectra: x − (xQ)Q', Q = orth(G')."""

    def __init__(self, basis: np.ndarray):
        self.q = np.linalg.qr(basis.T)[0] if basis.shape[0] else None

    def __call__(self, X: np.ndarray) -> np.ndarray:
        return X if self.q is None else X - (X @ self.q) @ self.q.T


def _concentrations(K: np.ndarray, X: np.ndarray, non_negative: bool) -> np.ndarray:
    """Least-squares (or NNLS) c for every row of X ≈ cK."""
    if not non_negative:
        return np.linalg.lstsq(K.T, X.T, rcond=None)[0].T
    return np.array([nnls(K.T, x)[0] for x in X]).reshape(X.shape[0], K.shape[0])


def condition_number(K: np.ndarray) -> float:
    """2-norm condition number of K with every row scaled to unit length."""
    norms = np.linalg.norm(K, axis=1)
    if np.any(norms == 0):
        return float("inf")
    return float(np.linalg.cond(K / norms[:, None]))


class ClassicalLeastSquares:
    """K-matrix CLS: several concentrations from one spectrum.

    Parameters
    ----------
    pure_spectra : ndarray (m, p), optional
        Pure-component reference spectra (rows of K, on the spectra's axis).
        When omitted, K is estimated from calibration mixtures in :meth:`fit`.
    non_negative : bool, default False
        Concentrations constrained to ≥ 0 (NNLS).
    baseline : {"none", "offset", "linear"}, default "none"
    confidence : float, default 0.95
        Level of the residual limit.
    condition_limit : float, default 30
        Condition number of K above which every prediction is flagged.

    Attributes
    ----------
    K_ : ndarray (m, p)
        Pure-component spectra, given or estimated (C⁺X of the
        baseline-projected spectra).
    baseline_basis_ : ndarray (b, p)
        G (b = 0, 1 or 2 rows).
    condition_number_ : float
    calibration_q_ : ndarray (n,)
        Q of the residuals that stand for new samples (leave-one-out when K
        is estimated).
    q_limit_ : float
    n_samples_, n_components_ : int
    """

    family = "cls"

    def __init__(self, pure_spectra=None, non_negative: bool = False, baseline: str = "none",
                 confidence: float = 0.95, condition_limit: float = DEFAULT_CONDITION_LIMIT):
        self.pure_spectra = pure_spectra
        self.non_negative = non_negative
        self.baseline = baseline
        self.confidence = confidence
        self.condition_limit = condition_limit

    def _check_params(self):
        if self.baseline not in BASELINES:
            raise InputError(f"baseline must be one of {', '.join(BASELINES)}", field="baseline")
        if not isinstance(self.non_negative, (bool, np.bool_)):
            raise InputError("non_negative must be true or false", field="non_negative")
        if not 0.5 <= float(self.confidence) < 1.0:
            raise InputError(f"confidence must be in [0.5, 1), got {self.confidence!r}",
                             field="confidence")
        limit = self.condition_limit
        if isinstance(limit, bool) or not isinstance(limit, numbers.Real) or not limit >= 1.0:
            raise InputError("condition_limit must be a number ≥ 1", field="condition_limit")

    def fit(self, X, C=None, axis=None) -> "ClassicalLeastSquares":
        """Set K and learn the residual limit.

        Parameters
        ----------
        X : ndarray (n, p)
            Calibration spectra: mixtures of known composition ``C`` (K is
            estimated), or, with ``pure_spectra``, spectra of typical samples
            whose residuals set the residual limit (``C`` not used then).
        C : ndarray (n, m), optional
            Known concentrations of the mixtures; required without
            ``pure_spectra``.
        axis : ndarray (p,), optional
            Wavenumbers of the columns, for the ``linear`` baseline (column
            index when omitted).
        """
        self._check_params()
        X, _ = check_xy(X)
        n, p = X.shape
        self.baseline_basis_ = baseline_basis(self.baseline, p, axis)
        project = _Projection(self.baseline_basis_)
        Xp = project(X)
        if self.pure_spectra is not None:
            if C is not None:
                raise InputError("C is only used to estimate K; with pure_spectra given, "
                                 "check predictions against C with validation statistics",
                                 field="C")
            K = np.atleast_2d(check_xy(np.atleast_2d(self.pure_spectra))[0])
            if K.shape[1] != p:
                raise InputError(f"pure spectra have {K.shape[1]} points, the spectra {p}",
                                 field="pure_spectra")
            self._set_K(K, project)
            if n < 3:
                raise InputError("the residual limit needs at least 3 spectra", field="X")
            fitted = _concentrations(self.projected_K_, Xp, bool(self.non_negative))
            E = Xp - fitted @ self.projected_K_
        else:
            C = self._check_concentrations(C, n)
            m = C.shape[1]
            if n < max(m + 2, 3):
                raise InputError(f"estimating K for {m} components with leave-one-out "
                                 f"residuals needs at least {max(m + 2, 3)} mixtures, got {n}",
                                 field="X")
            if np.linalg.matrix_rank(C) < m:
                raise InputError("the calibration concentrations are linearly dependent: "
                                 "K cannot be estimated", field="C")
            self._set_K(np.linalg.lstsq(C, Xp, rcond=None)[0], project)
            E = self._leave_one_out_residuals(C, Xp)
        self.calibration_q_ = np.einsum("ij,ij->i", E, E)
        self.q_limit_ = box_residual_limit(float(self.confidence), q_values=self.calibration_q_)
        self.n_samples_ = n
        return self

    @staticmethod
    def _check_concentrations(C, n: int) -> np.ndarray:
        if C is None:
            raise InputError("give the mixtures' concentrations C, or pure_spectra", field="C")
        C = np.asarray(C, dtype=np.float64)
        if C.ndim == 1:
            C = C[:, None]
        if C.ndim != 2 or C.shape[0] != n:
            raise InputError(f"C must have one row per spectrum ({n})", field="C")
        if not np.all(np.isfinite(C)):
            raise InputError(f"C row {int(np.argwhere(~np.isfinite(C))[0, 0])} is not finite",
                             field="C")
        return C

    def _set_K(self, K: np.ndarray, project: _Projection):
        self.K_ = np.ascontiguousarray(K)
        self.projected_K_ = project(self.K_)
        self.n_components_ = K.shape[0]
        if np.linalg.matrix_rank(self.projected_K_) < self.n_components_:
            raise InputError("the component spectra are linearly dependent (after the baseline "
                             "term): concentrations cannot be separated", field="pure_spectra")
        self.condition_number_ = condition_number(self.projected_K_)

    def _leave_one_out_residuals(self, C: np.ndarray, Xp: np.ndarray) -> np.ndarray:
        n = Xp.shape[0]
        E = np.empty_like(Xp)
        keep = np.ones(n, dtype=bool)
        for i in range(n):
            keep[i] = False
            K_i = np.linalg.lstsq(C[keep], Xp[keep], rcond=None)[0]
            keep[i] = True
            c_i = _concentrations(K_i, Xp[i:i + 1], bool(self.non_negative))
            E[i] = Xp[i] - c_i @ K_i
        return E

    # ------------------------------------------------------------ prediction
    def _spectra(self, X) -> np.ndarray:
        X, _ = check_xy(np.atleast_2d(np.asarray(X, dtype=np.float64)))
        if X.shape[1] != self.K_.shape[1]:
            raise InputError(f"spectra must have {self.K_.shape[1]} points, got {X.shape[1]}",
                             field="X")
        return X

    def _solve(self, X: np.ndarray):
        Xp = _Projection(self.baseline_basis_)(X)
        C = _concentrations(self.projected_K_, Xp, bool(self.non_negative))
        return C, Xp - C @ self.projected_K_

    def predict(self, X) -> np.ndarray:
        """Concentrations, shape (n, m)."""
        return self._solve(self._spectra(X))[0]

    def residuals(self, X) -> np.ndarray:
        """Residual spectra x − ĉK − b̂G, shape (n, p)."""
        return self._solve(self._spectra(X))[1]

    def baseline_coefficients(self, X) -> np.ndarray:
        """b̂ of the baseline term in the basis ``baseline_basis_``, shape (n, b)."""
        X = self._spectra(X)
        C, _ = self._solve(X)
        if self.baseline_basis_.shape[0] == 0:
            return np.zeros((X.shape[0], 0))
        return np.linalg.lstsq(self.baseline_basis_.T, (X - C @ self.K_).T, rcond=None)[0].T

    def check(self, X) -> FamilyChecks:
        """Concentrations with the residual and condition-number checks."""
        X = self._spectra(X)
        C, E = self._solve(X)
        q = np.einsum("ij,ij->i", E, E)
        cond = np.full(X.shape[0], self.condition_number_)
        return FamilyChecks(
            y_pred=C, values={"q": q, "condition_number": cond},
            limits={"q_limit": self.q_limit_, "condition_limit": float(self.condition_limit)},
            flags={"residual": q > self.q_limit_, "condition": cond > float(self.condition_limit)},
            flag_order=FLAGS)

    # ----------------------------------------------------------- evidence
    def evidence(self) -> dict[str, Any]:
        """The component spectra (rows of K) and the residual and condition limits."""
        return {"K": self.K_.copy(), "condition_number": self.condition_number_,
                "condition_limit": float(self.condition_limit), "q_limit": self.q_limit_,
                "calibration_q": self.calibration_q_.copy(), "confidence": float(self.confidence),
                "baseline": self.baseline, "non_negative": bool(self.non_negative),
                "k_source": "estimated" if self.pure_spectra is None else "pure_spectra",
                "n_samples": self.n_samples_}

    def explain(self, x) -> dict[str, Any]:
        """One spectrum: measured, fitted (ĉK + b̂G) and residual, with the limits.

        The residual of the projected fit is the residual of the fit with the
        baseline term (Frisch–Waugh–Lovell), so the fitted spectrum is x − residual.
        """
        X = self._spectra(x)[:1]
        C, E = self._solve(X)
        q = float(E[0] @ E[0])
        return {"measured": X[0], "fitted": X[0] - E[0], "residual": E[0],
                "concentrations": C[0].tolist(),
                "baseline_coefficients": self.baseline_coefficients(X)[0].tolist(),
                "q": q, "q_limit": self.q_limit_, "condition_number": self.condition_number_,
                "condition_limit": float(self.condition_limit),
                "flags": [name for name, bad in (
                    ("residual", q > self.q_limit_),
                    ("condition", self.condition_number_ > float(self.condition_limit))) if bad]}

    # ----------------------------------------------------------- plain state
    _ARRAYS = ("K", "baseline_basis", "calibration_q")

    def state_arrays(self) -> dict[str, np.ndarray]:
        return {k: np.ascontiguousarray(getattr(self, k + "_")) for k in self._ARRAYS}

    def state_json(self) -> dict[str, Any]:
        return {"family": self.family, "k_source": "estimated" if self.pure_spectra is None
                else "pure_spectra", "non_negative": bool(self.non_negative),
                "baseline": self.baseline, "confidence": float(self.confidence),
                "condition_limit": float(self.condition_limit), "q_limit": self.q_limit_,
                "condition_number": self.condition_number_, "n_samples": self.n_samples_,
                "n_components": self.n_components_}

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]
                   ) -> "ClassicalLeastSquares":
        state = take_arrays(arrays, cls._ARRAYS, cls.family)
        model = cls(pure_spectra=state["K"] if meta["k_source"] == "pure_spectra" else None,
                    non_negative=bool(meta["non_negative"]), baseline=meta["baseline"],
                    confidence=meta["confidence"], condition_limit=meta["condition_limit"])
        model._check_params()
        for key, value in state.items():
            setattr(model, key + "_", value)
        model.projected_K_ = _Projection(model.baseline_basis_)(model.K_)
        model.condition_number_ = float(meta["condition_number"])
        model.q_limit_ = float(meta["q_limit"])
        model.n_samples_, model.n_components_ = int(meta["n_samples"]), int(meta["n_components"])
        return model
