"""Band (peak) calibration: height or area above a two-point linear baseline.

The band value of a spectrum is read from the absorbance A(ν̃) over a band
[ν̃₁, ν̃₂] (cm⁻¹). A straight baseline runs through the absorbance at two anchor
points a₁ < a₂ (by default the band edges), read by linear interpolation on
the axis:

    b(ν̃) = A(a₁) + (A(a₂) − A(a₁))·(ν̃ − a₁)/(a₂ − a₁)

* ``area``   ∫ (A − b) dν̃ over the band, trapezoid rule on the axis points
  inside the band plus the two band edges (interpolated), on the ascending
  axis, so the area of a band above its baseline is positive whatever the
  direction the axis was given in;
* ``height`` max (A − b) over the same points.

The band value v is calibrated to the reference values by least squares,
y = β₀ + β₁v (+ β₂v² when ``degree=2``), with the coefficients' standard
errors s·√diag((Z'Z)⁻¹), s² = RSS/(n − degree − 1) (Draper & Smith, *Applied
Regression Analysis*, 3rd ed., Wiley 1998, ch. 2-3), and the project's
calibration statistics (:func:`registry.chemometrics.validation_statistics`).

Prediction-time checks (:meth:`BandCalibration.check`):

``band_range``
    the band value lies outside the calibration band values [min, max];
``baseline_anchor``
    an anchor absorbance lies outside its limits (the calibration range of
    that anchor, or ``anchor_limits`` when given);
``saturation``
    the largest absorbance in the band exceeds ``saturation_limit``.
"""

from __future__ import annotations

import numbers
from typing import Any

import numpy as np

from registry.chemometrics.families._state import finite_json, take_arrays
from registry.chemometrics.families.checks import FamilyChecks
from registry.chemometrics.pls import check_xy
from registry.chemometrics.validation import validation_statistics
from registry.errors import InputError
from registry.spectra.axes import normalise_ascending, same_axis

MEASURES = ("area", "height")
FLAGS = ("band_range", "baseline_anchor", "saturation")
# Above about 1.5 absorbance units too little light reaches the detector for a
# linear response (common practice); the limit is a parameter.
DEFAULT_SATURATION_LIMIT = 1.5


def _pair(value, name: str, what: str = "wavenumbers (cm⁻¹)") -> tuple[float, float]:
    """Two different finite numbers, returned in ascending order."""
    try:
        a, b = (float(v) for v in value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be two {what}, got {value!r}", field=name) from None
    if not (np.isfinite(a) and np.isfinite(b)) or a == b:
        raise InputError(f"{name} must be two different finite {what}, got {value!r}",
                         field=name)
    return (a, b) if a < b else (b, a)


def _interpolate(X: np.ndarray, axis: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Every row of X at ``points`` by linear interpolation on an ascending axis."""
    idx = np.clip(np.searchsorted(axis, points, side="right") - 1, 0, axis.size - 2)
    w = (points - axis[idx]) / (axis[idx + 1] - axis[idx])
    return X[:, idx] * (1.0 - w) + X[:, idx + 1] * w


class _BandWindow:
    """Where the band and anchors sit on one ascending axis."""

    def __init__(self, axis: np.ndarray, band: tuple[float, float], anchors: tuple[float, float]):
        lo, hi = band
        for name, (a, b) in (("band", band), ("anchors", anchors)):
            if a < axis[0] or b > axis[-1]:
                raise InputError(f"{name} [{a}, {b}] cm⁻¹ is not inside the axis "
                                 f"[{axis[0]}, {axis[-1]}] cm⁻¹", field=name)
        inside = np.flatnonzero((axis > lo) & (axis < hi))
        if inside.size < 1:
            raise InputError(f"band [{lo}, {hi}] cm⁻¹ holds no axis point; widen it",
                             field="band")
        self.axis = axis
        self.inside = inside
        self.grid = np.concatenate(([lo], axis[inside], [hi]))
        self.anchors = np.array(anchors, dtype=np.float64)
        self.edges = np.array(band, dtype=np.float64)

    def measure(self, X: np.ndarray, measure: str):
        """(band values, anchor absorbances (n, 2), largest absorbance in the band)."""
        anchor_abs = _interpolate(X, self.axis, self.anchors)
        edge_abs = _interpolate(X, self.axis, self.edges)
        absorbance = np.concatenate((edge_abs[:, :1], X[:, self.inside], edge_abs[:, 1:]), axis=1)
        slope = (anchor_abs[:, 1] - anchor_abs[:, 0]) / (self.anchors[1] - self.anchors[0])
        baseline = anchor_abs[:, :1] + slope[:, None] * (self.grid - self.anchors[0])
        corrected = absorbance - baseline
        if measure == "area":
            values = np.trapezoid(corrected, self.grid, axis=1)
        else:
            values = corrected.max(axis=1)
        return values, anchor_abs, absorbance.max(axis=1)


def band_values(X, axis, band, anchors=None, measure: str = "area") -> np.ndarray:
    """Band area or height above the two-point baseline for each spectrum.

    Parameters
    ----------
    X : array_like (n, p) or (p,)
        Absorbance spectra on ``axis``.
    axis : array_like (p,)
        Wavenumbers (cm⁻¹), ascending or descending.
    band : (float, float)
        Band limits in cm⁻¹, either order.
    anchors : (float, float), optional
        Baseline anchor points in cm⁻¹ (default: the band limits).
    measure : {"area", "height"}

    Returns
    -------
    ndarray (n,)
    """
    X = np.atleast_2d(np.asarray(X, dtype=np.float64))
    band = _pair(band, "band")
    anchors = band if anchors is None else _pair(anchors, "anchors")
    if measure not in MEASURES:
        raise InputError(f"measure must be one of {', '.join(MEASURES)}", field="measure")
    axis, X = normalise_ascending(axis, X, field="axis")
    return _BandWindow(axis, band, anchors).measure(X, measure)[0]


class BandCalibration:
    """Univariate calibration on one band's height or area.

    Parameters
    ----------
    band : (float, float)
        Band limits, cm⁻¹ (either order).
    anchors : (float, float), optional
        Baseline anchor points, cm⁻¹ (default: the band limits).
    measure : {"area", "height"}, default "area"
    degree : {1, 2}, default 1
        Linear calibration; 2 only when a quadratic is asked for.
    saturation_limit : float, default 1.5
        Absorbance above which the band region counts as saturated.
    anchor_limits : (float, float), optional
        Absorbance limits for both anchors; default: each anchor's range over
        the calibration spectra.

    Attributes
    ----------
    axis_ : ndarray (p,)
        Ascending axis the spectra must be on.
    coefficients_ : ndarray (degree + 1,)
        β₀, β₁ (, β₂): y = Σ βⱼ vʲ.
    coefficient_cov_ : ndarray (degree + 1, degree + 1)
        s²(Z'Z)⁻¹.
    coefficient_se_ : ndarray (degree + 1,)
    calibration_values_, calibration_y_ : ndarray (n,)
        Band values and reference values of the calibration spectra.
    value_min_, value_max_ : float
        Calibration range of the band value.
    anchor_min_, anchor_max_ : ndarray (2,)
        Limits of the two anchor absorbances.
    statistics_ : dict
        :class:`registry.chemometrics.ValidationStatistics` of the fitted
        values (``sec`` with n − degree − 1 degrees of freedom) as JSON.
    n_samples_ : int
    """

    family = "band"

    def __init__(self, band, anchors=None, measure: str = "area", degree: int = 1,
                 saturation_limit: float = DEFAULT_SATURATION_LIMIT, anchor_limits=None):
        self.band = band
        self.anchors = anchors
        self.measure = measure
        self.degree = degree
        self.saturation_limit = saturation_limit
        self.anchor_limits = anchor_limits

    def _check_params(self):
        band = _pair(self.band, "band")
        anchors = band if self.anchors is None else _pair(self.anchors, "anchors")
        if self.measure not in MEASURES:
            raise InputError(f"measure must be one of {', '.join(MEASURES)}", field="measure")
        if isinstance(self.degree, bool) or self.degree not in (1, 2):
            raise InputError(f"degree must be 1 (linear) or 2 (quadratic), got {self.degree!r}",
                             field="degree")
        if (not isinstance(self.saturation_limit, numbers.Real)
                or not np.isfinite(self.saturation_limit)):
            raise InputError("saturation_limit must be a finite absorbance",
                             field="saturation_limit")
        limits = (None if self.anchor_limits is None
                  else _pair(self.anchor_limits, "anchor_limits", "absorbances"))
        return band, anchors, limits

    def _window(self, axis: np.ndarray) -> _BandWindow:
        band, anchors, _ = self._check_params()
        return _BandWindow(axis, band, anchors)

    def fit(self, X, y, axis) -> "BandCalibration":
        """Measure the band on calibration spectra and fit y on the band value.

        Parameters
        ----------
        X : ndarray (n, p)
            Absorbance spectra on ``axis``.
        y : ndarray (n,)
            Reference values.
        axis : ndarray (p,)
            Wavenumbers, cm⁻¹, ascending or descending.
        """
        _, _, limits = self._check_params()
        X, y = check_xy(X, y)
        axis, X = normalise_ascending(axis, X, field="axis")
        d = int(self.degree)
        n = X.shape[0]
        if n < max(3, d + 2):
            raise InputError(f"a degree-{d} calibration needs at least {max(3, d + 2)} samples "
                             f"(its residual SD has n − {d + 1} degrees of freedom), got {n}",
                             field="X")
        values, anchor_abs, _ = self._window(axis).measure(X, self.measure)
        Z = np.vander(values, d + 1, increasing=True)
        if np.linalg.matrix_rank(Z) < d + 1:
            raise InputError(f"the calibration band values do not support a degree-{d} fit "
                             "(too few distinct values)", field="X")
        coef, *_ = np.linalg.lstsq(Z, y, rcond=None)
        fitted = Z @ coef
        s2 = float(np.sum((y - fitted) ** 2)) / (n - d - 1)
        self.axis_ = axis
        self.coefficients_ = coef
        self.coefficient_cov_ = s2 * np.linalg.inv(Z.T @ Z)
        self.coefficient_se_ = np.sqrt(np.diag(self.coefficient_cov_))
        self.calibration_values_ = values
        self.calibration_y_ = y
        self.value_min_, self.value_max_ = float(values.min()), float(values.max())
        if limits is None:
            self.anchor_min_, self.anchor_max_ = anchor_abs.min(axis=0), anchor_abs.max(axis=0)
        else:
            self.anchor_min_, self.anchor_max_ = np.full(2, limits[0]), np.full(2, limits[1])
        self.statistics_ = finite_json(validation_statistics(y, fitted, n_components=d).to_json())
        self.n_samples_ = n
        return self

    def _spectra(self, X, axis) -> np.ndarray:
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        X, _ = check_xy(X)
        if axis is not None:
            axis, X = normalise_ascending(axis, X, field="axis")
            if not same_axis(axis, self.axis_):
                raise InputError("spectra are not on the model axis; resample them first",
                                 field="axis")
        if X.shape[1] != self.axis_.size:
            raise InputError(f"spectra must have {self.axis_.size} points on the model axis, "
                             f"got {X.shape[1]}", field="X")
        return X

    def predict_values(self, values) -> np.ndarray:
        """Calibrated y for band values."""
        values = np.asarray(values, dtype=np.float64)
        Z = np.vander(values.reshape(-1), self.coefficients_.size, increasing=True)
        return Z @ self.coefficients_

    def predict(self, X, axis=None) -> np.ndarray:
        """y for spectra on the model axis (``axis`` only to check/reorder them)."""
        X = self._spectra(X, axis)
        values, _, _ = self._window(self.axis_).measure(X, self.measure)
        return self.predict_values(values)

    def check(self, X, axis=None) -> FamilyChecks:
        """Predictions with the band-range, anchor and saturation checks."""
        X = self._spectra(X, axis)
        values, anchor_abs, peak = self._window(self.axis_).measure(X, self.measure)
        flags = {
            "band_range": (values < self.value_min_) | (values > self.value_max_),
            "baseline_anchor": np.any((anchor_abs < self.anchor_min_)
                                      | (anchor_abs > self.anchor_max_), axis=1),
            "saturation": peak > float(self.saturation_limit),
        }
        return FamilyChecks(
            y_pred=self.predict_values(values),
            values={"band_value": values, "anchor_absorbance": anchor_abs,
                    "band_max_absorbance": peak},
            limits={"band_min": self.value_min_, "band_max": self.value_max_,
                    "anchor_min": self.anchor_min_, "anchor_max": self.anchor_max_,
                    "saturation_limit": float(self.saturation_limit)},
            flags=flags, flag_order=FLAGS)

    # ----------------------------------------------------------- evidence
    def evidence(self) -> dict[str, Any]:
        """The calibration line (band value against reference) and its fit, for review."""
        band, anchors, _ = self._check_params()
        return {"band": list(band), "anchors": list(anchors), "measure": self.measure,
                "degree": int(self.degree), "coefficients": self.coefficients_.tolist(),
                "coefficient_se": self.coefficient_se_.tolist(),
                "calibration_values": self.calibration_values_.copy(),
                "calibration_y": self.calibration_y_.copy(),
                "value_min": self.value_min_, "value_max": self.value_max_,
                "statistics": dict(self.statistics_), "n_samples": self.n_samples_}

    def explain(self, x) -> dict[str, Any]:
        """One spectrum around the band: absorbance, anchors, baseline and band value.

        The window runs from the lowest to the highest of the band limits and anchors,
        widened by half that span on each side, so the band is seen against its
        surroundings. ``baseline`` is the straight line through the two anchor
        absorbances evaluated on the window's axis points.
        """
        X = self._spectra(x, None)[:1]
        win = self._window(self.axis_)
        values, anchor_abs, peak = win.measure(X, self.measure)
        lo = min(win.edges[0], win.anchors[0])
        hi = max(win.edges[1], win.anchors[1])
        margin = (hi - lo) / 2.0
        keep = (self.axis_ >= lo - margin) & (self.axis_ <= hi + margin)
        nu = self.axis_[keep]
        slope = (anchor_abs[0, 1] - anchor_abs[0, 0]) / (win.anchors[1] - win.anchors[0])
        return {"axis": nu, "absorbance": X[0, keep],
               "baseline": anchor_abs[0, 0] + slope * (nu - win.anchors[0]),
               "anchors": win.anchors.tolist(), "anchor_absorbance": anchor_abs[0].tolist(),
               "band": win.edges.tolist(), "measure": self.measure,
               "band_value": float(values[0]), "band_max_absorbance": float(peak[0]),
               "y_pred": float(self.predict_values(values)[0])}

    # ----------------------------------------------------------- plain state
    _ARRAYS = ("axis", "coefficients", "coefficient_cov", "coefficient_se",
               "calibration_values", "calibration_y", "anchor_min", "anchor_max")

    def state_arrays(self) -> dict[str, np.ndarray]:
        return {k: np.ascontiguousarray(getattr(self, k + "_")) for k in self._ARRAYS}

    def state_json(self) -> dict[str, Any]:
        band, anchors, limits = self._check_params()
        return {"family": self.family, "band": list(band), "anchors": list(anchors),
                "anchors_given": self.anchors is not None,
                "measure": self.measure, "degree": int(self.degree),
                "saturation_limit": float(self.saturation_limit),
                "anchor_limits": None if limits is None else list(limits),
                "value_min": self.value_min_, "value_max": self.value_max_,
                "statistics": self.statistics_, "n_samples": self.n_samples_}

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> "BandCalibration":
        model = cls(band=meta["band"], anchors=meta["anchors"] if meta["anchors_given"] else None,
                    measure=meta["measure"], degree=meta["degree"],
                    saturation_limit=meta["saturation_limit"], anchor_limits=meta["anchor_limits"])
        model._check_params()
        for key, value in take_arrays(arrays, cls._ARRAYS, cls.family).items():
            setattr(model, key + "_", value)
        model.value_min_, model.value_max_ = float(meta["value_min"]), float(meta["value_max"])
        model.statistics_ = dict(meta["statistics"])
        model.n_samples_ = int(meta["n_samples"])
        return model
