"""Bytes of a fitted family model: plain arrays + JSON, verified by SHA-256 on load.

Uses the project's container (:mod:`registry.chemometrics.container`), so a
family model is stored like a PLS model: deterministic bytes, no pickle, the
hash checked before anything is parsed. The document holds the family name
and the model's ``state_json()``; arrays are the model's ``state_arrays()``
plus any ``extra_arrays`` (for example the axis) under ``extra/``.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from registry.chemometrics.container import pack, unpack
from registry.chemometrics.families.band import BandCalibration
from registry.chemometrics.families.cls import ClassicalLeastSquares
from registry.chemometrics.families.derived import DerivedProperty
from registry.chemometrics.families.neighbours import NeighbourLookup
from registry.errors import FormatError, InputError
from registry.lineage.canonical import sha256_hex

FORMAT = "specledger-family-model"
VERSION = 1
FAMILIES = {cls.family: cls for cls in (BandCalibration, ClassicalLeastSquares,
                                        DerivedProperty, NeighbourLookup)}


def family_to_bytes(model, metadata: dict[str, Any] | None = None,
                    extra_arrays: dict[str, np.ndarray] | None = None) -> bytes:
    """Deterministic bytes of a fitted family model (see module docstring)."""
    if getattr(model, "family", None) not in FAMILIES:
        raise InputError(f"not a model family: {type(model).__name__}", field="family")
    arrays = {f"model/{k}": v for k, v in model.state_arrays().items()}
    arrays.update({f"extra/{k}": v for k, v in (extra_arrays or {}).items()})
    document = {"format": FORMAT, "version": VERSION, "family": model.family,
                "model": model.state_json(), "metadata": dict(metadata or {})}
    json.dumps(document, allow_nan=False)  # fail here, not at load time
    return pack(arrays, document)


def family_sha256(model, metadata: dict[str, Any] | None = None,
                  extra_arrays: dict[str, np.ndarray] | None = None) -> str:
    return sha256_hex(family_to_bytes(model, metadata, extra_arrays))


def family_from_bytes(blob: bytes, expected_sha256: str):
    """(model, metadata, extra arrays); the SHA-256 is checked first.

    Raises
    ------
    registry.errors.IntegrityError
        The bytes do not match ``expected_sha256``.
    registry.errors.FormatError
        Not a family model of a known version or family.
    """
    if not expected_sha256:
        raise InputError("an expected SHA-256 is required to load a model",
                         field="expected_sha256")
    arrays, doc = unpack(bytes(blob), expected_sha256)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT or doc.get("version") != VERSION:
        raise FormatError("not a family model artifact of a supported version")
    cls = FAMILIES.get(doc.get("family"))
    if cls is None:
        raise FormatError(f"unknown model family {doc.get('family')!r}")

    def part(prefix: str) -> dict[str, np.ndarray]:
        return {k[len(prefix):]: v for k, v in arrays.items() if k.startswith(prefix)}

    return cls.from_state(part("model/"), doc["model"]), doc.get("metadata", {}), part("extra/")
