"""Simulated primary-test-method (reference) noise for demo property values.

A single result scatters with σ = r/2.77 within one laboratory and σ = R/2.77
between laboratories, r and R being the method's repeatability and
reproducibility, 95 % limits on the difference of two results (ISO 5725-6;
ASTM E177; :func:`registry.precision.sd_from_limit`). r and R are read from
the registry's own method catalog (:data:`registry.catalog.METHODS`, each
figure with its source there), so the demo's noise and the registry's
acceptance figures are one table.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from registry.catalog import method_of, precision_at
from registry.errors import InputError
from registry.precision import sd_from_limit

from .blending import PROPERTY_CODES

#: The catalog's method row for every property the generator produces.
PRECISIONS: dict[str, dict[str, Any]] = {
    code: method_of(code)
    for code in dict.fromkeys(c for codes in PROPERTY_CODES.values() for c in codes)
}


def reference_sigma(property_code: str, values, between_labs: bool = False) -> np.ndarray:
    """σ of one reference result at each value: r/2.77 (within lab) or R/2.77."""
    if property_code not in PRECISIONS:
        raise InputError(f"no reference precision for property {property_code!r}; known: "
                         f"{', '.join(PRECISIONS)}", field="property_code")
    arr = np.asarray(values, dtype=np.float64)
    if not np.isfinite(arr).all():
        raise InputError(f"{property_code} values must be finite", field=property_code)
    spec = PRECISIONS[property_code]["reproducibility" if between_labs else "repeatability"]
    sigma = [sd_from_limit(max(precision_at(spec, level), 0.0)) for level in arr.ravel()]
    return np.array(sigma, dtype=np.float64).reshape(arr.shape)


def reference_noise(property_code: str, values, rng: np.random.Generator,
                    between_labs: bool = False) -> np.ndarray:
    """Values as a primary test method would report them: true value + N(0, σ²).

    Parameters
    ----------
    property_code : str
        One of :data:`PRECISIONS` (RON, MON, CN, DENSITY, VP, T50, AROMATICS,
        BENZENE, ETHANOL, FAME).
    values : array-like
        True property values.
    rng : numpy.random.Generator
    between_labs : bool
        Use reproducibility R instead of repeatability r.

    Returns
    -------
    ndarray, float64, same shape as ``values``
    """
    if not isinstance(rng, np.random.Generator):
        raise InputError("rng must be a numpy.random.Generator", field="rng")
    sigma = reference_sigma(property_code, values, between_labs)
    arr = np.asarray(values, dtype=np.float64)
    return arr + sigma * rng.standard_normal(arr.shape)

