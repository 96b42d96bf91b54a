"""Spectral axes: direction, units, identity and resampling.

Every spectrum the registry keeps has an ascending float64 axis. Files may
store the axis descending (infrared instruments usually write 4000 → 400
cm⁻¹) or in wavelength units; the helpers here bring them to one form and
refuse axes that cannot be made strictly ascending.
"""

from __future__ import annotations

import hashlib
import re

import numpy as np
from scipy.interpolate import make_interp_spline

from registry.errors import InputError

WAVENUMBER = "1/CM"
MICROMETERS = "MICROMETERS"
NANOMETERS = "NANOMETERS"
X_UNITS = (WAVENUMBER, MICROMETERS, NANOMETERS)

# Spellings seen in the wild for the three axis units, after upper-casing and
# removing blanks.  The JCAMP-DX spec (McDonald & Wilks 1988) names 1/CM,
# MICROMETERS and NANOMETERS; the rest are common practice.
_UNIT_ALIASES = {
    "1/CM": WAVENUMBER, "CM-1": WAVENUMBER, "CM^-1": WAVENUMBER, "CM**-1": WAVENUMBER,
    "WAVENUMBER": WAVENUMBER, "WAVENUMBERS": WAVENUMBER, "1/CENTIMETERS": WAVENUMBER,
    "MICROMETERS": MICROMETERS, "MICROMETER": MICROMETERS, "MICRONS": MICROMETERS,
    "MICRON": MICROMETERS, "UM": MICROMETERS, "µM": MICROMETERS, "ΜM": MICROMETERS,
    "NANOMETERS": NANOMETERS, "NANOMETER": NANOMETERS, "NM": NANOMETERS,
}

# 1 cm = 1e4 µm = 1e7 nm, so wavenumber [1/cm] = 1e4 / λ[µm] = 1e7 / λ[nm].
_TO_WAVENUMBER_NUMERATOR = {MICROMETERS: 1e4, NANOMETERS: 1e7}


def canonical_x_unit(unit: str, *, file: str | None = None, line: int | None = None,
                     field: str | None = "x_unit") -> str:
    """Return the canonical name ("1/CM", "MICROMETERS", "NANOMETERS") of an axis unit.

    Raises
    ------
    InputError
        When the unit is not one of the three supported units.
    """
    key = re.sub(r"\s+", "", str(unit)).upper()
    try:
        return _UNIT_ALIASES[key]
    except KeyError:
        raise InputError(f"unsupported axis unit {unit!r}; expected one of {', '.join(X_UNITS)}",
                         file=file, line=line, field=field) from None


def _as_axis(x, *, file=None, line=None, field="x") -> np.ndarray:
    try:
        axis = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"axis is not numeric: {exc}", file=file, line=line, field=field) from None
    if axis.ndim != 1:
        raise InputError(f"axis must be one-dimensional, got shape {axis.shape}",
                         file=file, line=line, field=field)
    bad = np.flatnonzero(~np.isfinite(axis))
    if bad.size:
        raise InputError(f"axis value at index {bad[0]} is {float(axis[bad[0]])} (not finite)",
                         file=file, line=line, field=field)
    return axis


def normalise_ascending(x, Y, *, file: str | None = None, line: int | None = None,
                        field: str | None = "x"):
    """Return ``(x, Y)`` with a strictly ascending axis.

    A strictly descending axis is reversed together with the last dimension of
    ``Y`` (a single spectrum of shape ``(n,)`` or a stack of shape ``(m, n)``).

    Parameters
    ----------
    x : array_like, shape (n,)
        Axis values.
    Y : array_like, shape (n,) or (m, n)
        Ordinates; the dtype is kept.
    file, line, field : optional
        Where the axis came from, used in error messages.

    Returns
    -------
    x : ndarray of float64, shape (n,)
    Y : ndarray, same shape and dtype as the input, C-contiguous

    Raises
    ------
    InputError
        Non-finite axis values, a repeated axis value or an axis that changes
        direction; the message names the 0-based index of the offending point.
    """
    axis = _as_axis(x, file=file, line=line, field=field)
    Y = np.asarray(Y)
    if Y.shape[-1:] != axis.shape:
        raise InputError(f"axis has {axis.size} points but the spectra have {Y.shape[-1:]}",
                         file=file, line=line, field=field)
    if axis.size < 2:
        return axis.copy(), np.ascontiguousarray(Y)
    step = np.diff(axis)
    zero = np.flatnonzero(step == 0)
    if zero.size:
        i = int(zero[0]) + 1
        raise InputError(f"axis value {float(axis[i])!r} at index {i} repeats the value at "
                         f"index {i - 1}", file=file, line=line, field=field)
    ascending = step[0] > 0
    turn = np.flatnonzero((step > 0) != ascending)
    if turn.size:
        i = int(turn[0]) + 1
        raise InputError(
            f"axis is not monotonic: value {float(axis[i])!r} at index {i} follows "
            f"{float(axis[i - 1])!r}",
            file=file, line=line, field=field)
    if ascending:
        return axis.copy(), np.ascontiguousarray(Y)
    return axis[::-1].copy(), np.ascontiguousarray(Y[..., ::-1])


def convert_axis_to_wavenumber(x, unit: str) -> np.ndarray:
    """Convert an axis to wavenumbers (1/CM).

    ν̃ [cm⁻¹] = 10⁴ / λ [µm] = 10⁷ / λ [nm].  The conversion reverses the
    order of the points; pass the result through :func:`normalise_ascending`
    together with the spectra.

    Raises
    ------
    InputError
        Unknown unit, or a wavelength that is not positive.
    """
    canonical = canonical_x_unit(unit)
    axis = _as_axis(x)
    if canonical == WAVENUMBER:
        return axis.copy()
    bad = np.flatnonzero(axis <= 0)
    if bad.size:
        raise InputError(f"wavelength {float(axis[bad[0]])!r} at index {bad[0]} is not positive",
                         field="x")
    return _TO_WAVENUMBER_NUMERATOR[canonical] / axis


def axis_sha256(x, unit: str = WAVENUMBER) -> str:
    """Identity of an axis: SHA-256 hex digest of ``unit`` + NUL + float64 bytes.

    The bytes hashed are the canonical unit name in ASCII (``"1/CM"``,
    ``"MICROMETERS"`` or ``"NANOMETERS"``), one zero byte, then the axis
    values as little-endian IEEE-754 float64 in array order.  Two axes have
    the same digest only if every value is bit-identical.
    """
    canonical = canonical_x_unit(unit)
    axis = np.ascontiguousarray(_as_axis(x), dtype="<f8")
    digest = hashlib.sha256(canonical.encode("ascii") + b"\0")
    digest.update(axis.tobytes())
    return digest.hexdigest()


def same_axis(a, b, rtol: float = 1e-6) -> bool:
    """True when both axes have the same length and agree point by point.

    Point ``i`` agrees when ``|a_i − b_i| ≤ rtol · max(|a_i|, |b_i|)``.
    """
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if a.shape != b.shape:
        return False
    return bool(np.all(np.abs(a - b) <= rtol * np.maximum(np.abs(a), np.abs(b))))


def resample(spectra, source_axis, target_axis, kind: str = "linear") -> np.ndarray:
    """Interpolate spectra from one axis onto another.

    Parameters
    ----------
    spectra : array_like, shape (n,) or (m, n)
        Ordinates on ``source_axis``.
    source_axis : array_like, shape (n,)
        Strictly monotonic axis (descending is accepted).
    target_axis : array_like, shape (k,)
        Points to interpolate at, any order; must lie inside the measured range.
    kind : {"linear", "cubic"}
        Piecewise-linear interpolation, or a not-a-knot cubic spline
        (de Boor, *A Practical Guide to Splines*, 1978), both built with
        :func:`scipy.interpolate.make_interp_spline`.

    Returns
    -------
    ndarray, shape (k,) or (m, k)
        Floating input keeps its dtype; the computation is done in float64.

    Raises
    ------
    InputError
        Unknown ``kind``, bad axes, or target points outside the measured range
        (extrapolation is never done silently).
    """
    degree = {"linear": 1, "cubic": 3}.get(kind)
    if degree is None:
        raise InputError(f"unknown interpolation kind {kind!r}; use 'linear' or 'cubic'",
                         field="kind")
    values = np.asarray(spectra)
    out_dtype = values.dtype if np.issubdtype(values.dtype, np.floating) else np.float64
    axis, ordered = normalise_ascending(source_axis, values.astype(np.float64, copy=False),
                                        field="source_axis")
    target = _as_axis(target_axis, field="target_axis")
    if axis.size < degree + 1:
        raise InputError(f"{kind} interpolation needs at least {degree + 1} axis points",
                         field="source_axis")
    # A target end that differs from the measured end only by rounding (for
    # example after a unit conversion) is clipped; anything further is refused.
    slack = 1e-9 * (axis[-1] - axis[0])
    outside = np.flatnonzero((target < axis[0] - slack) | (target > axis[-1] + slack))
    if outside.size:
        i = int(outside[0])
        raise InputError(
            f"target axis value {float(target[i])!r} at index {i} lies outside the measured "
            f"range [{float(axis[0])!r}, {float(axis[-1])!r}]; extrapolation is not allowed",
            field="target_axis")
    target = np.clip(target, axis[0], axis[-1])
    spline = make_interp_spline(axis, ordered, k=degree, axis=-1)
    return np.asarray(spline(target), dtype=out_dtype)


def on_axis(spectra, source_axis, target_axis) -> np.ndarray:
    """Spectra measured on ``source_axis`` as values on ``target_axis``.

    Returned as they are when the two axes are identical (no interpolation
    rounding), else resampled piecewise-linearly by :func:`resample`, which
    refuses a target reaching outside the measured range.
    """
    source = np.asarray(source_axis)
    target = np.asarray(target_axis)
    if source.shape == target.shape and np.array_equal(source, target):
        return np.asarray(spectra)
    return resample(spectra, source, target, kind="linear")


def transmittance_to_absorbance(T, percent: bool | None = None, *, file: str | None = None,
                                line: int | None = None, field: str | None = "y") -> np.ndarray:
    """Convert transmittance to absorbance, A = −log10(T).

    Parameters
    ----------
    T : array_like
        Transmittance as a fraction (0–1) or in percent (0–100).
    percent : bool or None
        ``None`` decides from the data: values above 1.5 can only be percent
        (common practice: real fractional transmittance barely exceeds 1).

    Raises
    ------
    InputError
        A transmittance that is zero, negative or not finite (the message
        names its index).
    """
    values = np.asarray(T, dtype=np.float64)
    flat = values.reshape(-1)
    bad = np.flatnonzero(~np.isfinite(flat) | (flat <= 0))
    if bad.size:
        i = int(bad[0])
        raise InputError(f"transmittance {float(flat[i])!r} at index {i} must be positive and "
                         "finite to take a logarithm", file=file, line=line, field=field)
    if percent is None:
        percent = bool(flat.size) and float(flat.max()) > 1.5
    if percent:
        values = values / 100.0
    return -np.log10(values)
