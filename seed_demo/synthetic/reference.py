"""Simulated primary-test-method (reference) noise for demo property values.

A single result scatters with σ = r/2.77 within one laboratory and σ = R/2.77
between laboratories, r and R being the method's repeatability and
reproducibility (r, R ≈ 2.77·s; domain notes §2, derived). The figures below
are those of domain notes §2; most are from memory there and are marked so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from registry.errors import InputError
from registry.precision import sd_from_limit


@dataclass(frozen=True)
class Precision:
    """Repeatability r and reproducibility R of a method, as linear functions of the level.

    ``r(X) = r_at + r_slope·(X − level)`` and likewise for R; constant when the
    slopes are zero.
    """

    method: str
    level: float
    r_at: float
    R_at: float
    r_slope: float = 0.0
    R_slope: float = 0.0
    source: str = ""

    def limit(self, values: np.ndarray, between_labs: bool) -> np.ndarray:
        at, slope = (self.R_at, self.R_slope) if between_labs else (self.r_at, self.r_slope)
        return at + slope * (values - self.level)


PRECISIONS: dict[str, Precision] = {
    # ASTM D613: R = 3.8 at CN 48 and 4.3 at CN 52, linear between (read, §2);
    # r 0.8 at 48 rising like R to ~0.9 at 52 (from memory, §2 gives 0.8–0.9)
    "CN": Precision("ASTM D613", 48.0, r_at=0.8, R_at=3.8, r_slope=0.025, R_slope=0.125,
                    source="domain notes §2: R read; r from memory"),
    "RON": Precision("ASTM D2699", 0.0, r_at=0.2, R_at=0.7,
                     source="domain notes §2, from memory"),
    "MON": Precision("ASTM D2700", 0.0, r_at=0.2, R_at=0.9,
                     source="domain notes §2, from memory"),
    # chosen inside the §2 ranges r 0.0001–0.0005, R 0.0005–0.002 g/mL
    "DENSITY": Precision("ASTM D4052", 0.0, r_at=0.0002, R_at=0.0010,
                         source="domain notes §2 ranges, from memory; values chosen"),
    # R ≈ 2–3 kPa (§2, from memory); r chosen as about a third of R (demo choice)
    "VP": Precision("ASTM D5191", 0.0, r_at=0.8, R_at=2.5,
                    source="domain notes §2 (R, from memory); r a demo choice"),
    # the remaining figures are demo choices of plausible size (from memory,
    # not taken from the method texts)
    "T50": Precision("ASTM D86", 0.0, r_at=1.5, R_at=4.0, source="demo choice, from memory"),
    "AROMATICS": Precision("ASTM D1319", 0.0, r_at=0.8, R_at=2.5,
                           source="demo choice, from memory"),
    "BENZENE": Precision("ASTM D6277", 0.0, r_at=0.03, R_at=0.12,
                         source="demo choice, from memory"),
    "ETHANOL": Precision("ASTM D5599", 0.0, r_at=0.1, R_at=0.4, source="demo choice, from memory"),
    "FAME": Precision("EN 14078", 0.0, r_at=0.1, R_at=0.3, source="demo choice, from memory"),
}


def reference_sigma(property_code: str, values, between_labs: bool = False) -> np.ndarray:
    """σ of one reference result at each value: r/2.77 (within lab) or R/2.77."""
    if property_code not in PRECISIONS:
        raise InputError(f"no reference precision for property {property_code!r}; known: "
                         f"{', '.join(PRECISIONS)}", field="property_code")
    arr = np.asarray(values, dtype=np.float64)
    if not np.isfinite(arr).all():
        raise InputError(f"{property_code} values must be finite", field=property_code)
    limit = PRECISIONS[property_code].limit(arr, between_labs)
    # one definition of r, R = 2.77·σ (ISO 5725-6) for the generator and the acceptance rule
    return np.maximum(limit, 0.0) * sd_from_limit(1.0)


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
