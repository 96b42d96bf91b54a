"""Model families beyond PLS: band, classical least squares, derived, nearest neighbour.

Every family is an estimator with ``fit``/``predict`` and a ``check`` that
returns :class:`FamilyChecks` (values, limits and flags per sample, read like
:class:`registry.chemometrics.DiagnosticsResult`), and stores its fitted state
as plain arrays + JSON (``state_arrays``/``state_json``/``from_state``;
:func:`family_to_bytes` / :func:`family_from_bytes` for hashed bytes).
"""

from registry.chemometrics.families.artifact import (
    FAMILIES,
    family_from_bytes,
    family_sha256,
    family_to_bytes,
)
from registry.chemometrics.families.band import BandCalibration, band_values
from registry.chemometrics.families.checks import FamilyChecks
from registry.chemometrics.families.cls import ClassicalLeastSquares
from registry.chemometrics.families.derived import DerivedProperty
from registry.chemometrics.families.formula import parse
from registry.chemometrics.families.neighbours import NeighbourLookup
from registry.chemometrics.families.residual_limit import box_residual_limit

__all__ = [
    "FAMILIES",
    "BandCalibration",
    "ClassicalLeastSquares",
    "DerivedProperty",
    "FamilyChecks",
    "NeighbourLookup",
    "band_values",
    "box_residual_limit",
    "family_from_bytes",
    "family_sha256",
    "family_to_bytes",
    "parse",
]
