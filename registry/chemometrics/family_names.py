"""The closed set of model-family names a model version can have (stored in ``model_version.family``)."""

from __future__ import annotations

from enum import StrEnum


class ModelFamily(StrEnum):
    """How a model version turns what it is given into a value.

    ``pls`` is the multivariate calibration; ``band``, ``cls`` and ``neighbours`` work on
    spectra too; ``derived`` combines other properties' results by a formula.
    """

    PLS = "pls"
    BAND = "band"
    CLS = "cls"
    DERIVED = "derived"
    NEIGHBOURS = "neighbours"
