"""Input checks shared by the selection algorithms.

Every check raises :class:`registry.errors.InputError` naming the argument
(``field=``) and, for bad values, the first offending row and column, so a
caller can point the user at the spectrum that needs fixing.
"""

from __future__ import annotations

import numbers

import numpy as np

from registry.errors import InputError

# Rows checked per block for NaN/Inf, so the check never allocates an n×d mask.
_FINITE_CHECK_ELEMENTS = 4_000_000


def check_matrix(X, name: str, *, min_rows: int = 1) -> np.ndarray:
    """Return ``X`` as a 2-D numeric array (no copy if it already is one).

    Raises InputError for a wrong shape, a non-numeric dtype, too few rows
    or a NaN/Inf value (naming the first bad row and column, 0-based).
    """
    try:
        arr = np.asarray(X)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} cannot be read as a numeric array: {exc}", field=name) from exc
    if arr.ndim != 2:
        raise InputError(f"{name} must be a 2-D array (rows = samples), got {arr.ndim}-D",
                         field=name)
    if arr.dtype.kind not in "biuf":
        raise InputError(f"{name} must be numeric, got dtype {arr.dtype}", field=name)
    n, d = arr.shape
    if n < min_rows:
        raise InputError(f"{name} needs at least {min_rows} row(s), got {n}", field=name)
    if d < 1:
        raise InputError(f"{name} has no columns", field=name)
    if arr.dtype.kind == "f":
        _check_finite(arr, name)
    return arr


def _check_finite(arr: np.ndarray, name: str) -> None:
    step = max(1, _FINITE_CHECK_ELEMENTS // arr.shape[1])
    for start in range(0, arr.shape[0], step):
        block = arr[start:start + step]
        bad = ~np.isfinite(block)
        if bad.any():
            r, c = np.argwhere(bad)[0]
            value = block[r, c]
            raise InputError(
                f"{name} row {start + r}, column {c} is {value} (NaN/Inf are not allowed; "
                "remove or repair that spectrum first)", field=name)


def check_count(value, name: str, *, minimum: int = 1) -> int:
    """Return ``value`` as an int >= ``minimum`` (bools are refused)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise InputError(f"{name} must be an integer, got {value!r}", field=name)
    value = int(value)
    if value < minimum:
        raise InputError(f"{name} must be at least {minimum}, got {value}", field=name)
    return value


def check_indices(indices, n_rows: int, name: str) -> np.ndarray:
    """Return unique in-range row indices as an int64 array (empty if None)."""
    if indices is None:
        return np.empty(0, dtype=np.int64)
    arr = np.asarray(indices)
    if arr.size == 0:
        return np.empty(0, dtype=np.int64)
    if arr.ndim != 1:
        raise InputError(f"{name} must be a 1-D list of row indices", field=name)
    if arr.dtype.kind not in "iu":
        raise InputError(f"{name} must hold integer row indices, got dtype {arr.dtype}",
                         field=name)
    arr = arr.astype(np.int64)
    out_of_range = (arr < 0) | (arr >= n_rows)
    if out_of_range.any():
        bad = int(arr[np.argmax(out_of_range)])
        raise InputError(f"{name} holds index {bad}, outside 0..{n_rows - 1}", field=name)
    uniq, counts = np.unique(arr, return_counts=True)
    if (counts > 1).any():
        raise InputError(f"{name} lists index {int(uniq[np.argmax(counts > 1)])} more than once",
                         field=name)
    return arr


def check_weights(values, n_columns: int, name: str) -> np.ndarray:
    """Return strictly positive, finite per-column values as float64."""
    arr = np.asarray(values, dtype=np.float64).ravel()
    if arr.shape != (n_columns,):
        raise InputError(f"{name} must have one value per column ({n_columns}), got {arr.size}",
                         field=name)
    if not np.all(np.isfinite(arr)) or np.any(arr <= 0):
        raise InputError(f"{name} must be finite and > 0 for every column", field=name)
    return arr
