"""One interface over every model family's stored artifact.

The services never ask which family a version belongs to: they load its artifact
with :func:`load_fitted` and get a :class:`FittedModel`, which says

* ``axis`` — the axis raw spectra must be on (every version is trained on a
  calibration set of spectra, so every artifact has one);
* ``inputs`` — property codes whose results it combines (a derived property; empty
  for families that read spectra only): the caller supplies those results for the
  same spectra;
* ``assess(X, inputs)`` — values (NaN where the family gives none) and one plain
  record per spectrum (check values, limits, ``y_pred``, ``flags``), the shape of
  :meth:`registry.chemometrics.diagnostics.DiagnosticsResult.records`;
* ``description`` and ``summary()`` — what the trace and the pages say it is;
* ``evidence()`` — the family's own calibration evidence for the reviewer (band: the
  calibration line; CLS: the component spectra; derived: the formula and its inputs'
  SEPs; look-up: the rule and its limit; PLS: nothing beyond the cross-validation
  record, ``cross_validation``), plain JSON and arrays;
* ``explain(X, inputs)`` — the same for one spectrum (band: the spectrum around the
  band with its baseline; CLS: measured, fitted and residual spectra; derived: each
  input's share of the uncertainty; look-up: the neighbours; PLS: its check record).
  A ``sample_ids`` entry lists the calibration samples it refers to (registry ids).

PLS artifacts are :class:`~registry.chemometrics.artifact.TrainedModel`; the other
families are :mod:`registry.chemometrics.families` estimators packed with
:func:`~registry.chemometrics.families.family_to_bytes`, with the axis, an optional
preprocessing recipe's fitted state and, for a multi-component model, which output
column is the reported property kept beside them.
"""

from __future__ import annotations

import json
import struct
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from registry.chemometrics.artifact import FORMAT as PLS_FORMAT, TrainedModel
from registry.chemometrics.container import MAGIC
from registry.chemometrics.families import family_from_bytes, family_to_bytes
from registry.chemometrics.families.artifact import FORMAT as FAMILY_FORMAT
from registry.chemometrics.family_names import ModelFamily
from registry.errors import FormatError, InputError
from registry.lineage.canonical import sha256_hex
from registry.spectra.preprocessing import SpectralPipeline

#: What each family is, in words for the trace and the pages.
DESCRIPTIONS: dict[ModelFamily, str] = {
    ModelFamily.PLS: "PLS1 regression on preprocessed spectra",
    ModelFamily.BAND: "univariate calibration on one absorption band's height or area",
    ModelFamily.CLS: "classical least squares (K-matrix) on component spectra",
    ModelFamily.DERIVED: "a formula over other properties' results",
    ModelFamily.NEIGHBOURS: "look-up of similar samples, not a model: the reference values of "
                            "the nearest calibration samples",
}


@dataclass
class Assessment:
    """Values and per-spectrum records of one :meth:`FittedModel.assess` call."""

    y: np.ndarray
    records: list[dict[str, Any]] = field(default_factory=list)


class FittedModel:
    """Base of the family adapters (see the module docstring)."""

    family: ModelFamily
    axis: np.ndarray
    inputs: tuple[str, ...] = ()
    n_parameters: int = 0
    metadata: dict[str, Any]

    @property
    def description(self) -> str:
        return DESCRIPTIONS[self.family]

    def assess(self, X_raw: np.ndarray, inputs: Mapping[str, np.ndarray] | None = None
               ) -> Assessment:
        raise NotImplementedError

    def summary(self) -> dict[str, Any]:
        """Family settings and fitted figures as plain JSON (for trace and pages)."""
        return {}

    #: The stored cross-validation record (PLS), else None.
    cross_validation = None

    def evidence(self) -> dict[str, Any]:
        """The family's calibration evidence (see the module docstring)."""
        return {}

    def explain(self, X_raw: np.ndarray, inputs: Mapping[str, np.ndarray] | None = None
                ) -> dict[str, Any]:
        """The family's evidence for the first spectrum of ``X_raw`` (by default its check
        record)."""
        first = {k: np.asarray(v)[:1] for k, v in (inputs or {}).items()} if inputs else inputs
        return self.assess(_raw(X_raw, self.axis.size)[:1], first).records[0]

    def to_bytes(self) -> bytes:
        raise NotImplementedError

    @property
    def sha256(self) -> str:
        return sha256_hex(self.to_bytes())


def _raw(X_raw, width: int) -> np.ndarray:
    X = np.asarray(X_raw, dtype=np.float64)
    if X.ndim == 1:
        X = X[None, :]
    if X.ndim != 2 or X.shape[1] != width:
        raise InputError(f"spectra must have {width} points on the model axis, got shape "
                         f"{X.shape}", field="X")
    return X


class PLSModel(FittedModel):
    """A :class:`TrainedModel` behind the common interface."""

    family = ModelFamily.PLS

    def __init__(self, trained: TrainedModel):
        self.trained = trained
        self.axis = trained.axis
        self.metadata = trained.metadata
        self.n_parameters = trained.n_components

    def assess(self, X_raw, inputs=None) -> Assessment:
        y, diag = self.trained.predict(X_raw)
        return Assessment(np.asarray(y, dtype=np.float64), diag.records())

    def summary(self) -> dict[str, Any]:
        return {"n_components": self.trained.n_components, "recipe": self.trained.recipe}

    @property
    def cross_validation(self):
        return self.trained.cv

    def to_bytes(self) -> bytes:
        return self.trained.to_bytes()


class SpectralFamilyModel(FittedModel):
    """A band, CLS or neighbour estimator fitted on (optionally preprocessed) raw spectra.

    Parameters
    ----------
    estimator
        Fitted; its ``check(X)`` takes preprocessed spectra.
    axis : ndarray
        Raw spectra's axis.
    preprocessor : SpectralPipeline
        Fitted (an empty recipe when the family reads absorbance as measured).
    metadata : dict
        JSON-able; ``output_index`` picks the reported column of a multi-output
        estimator (CLS: the component that is this version's property).
    """

    def __init__(self, estimator, axis: np.ndarray, preprocessor: SpectralPipeline,
                 metadata: dict[str, Any] | None = None):
        self.estimator = estimator
        self.family = ModelFamily(estimator.family)
        self.axis = np.ascontiguousarray(axis, dtype=np.float64)
        self.preprocessor = preprocessor
        self.metadata = dict(metadata or {})
        self.n_parameters = int(self.metadata.get("n_parameters", 0))

    def assess(self, X_raw, inputs=None) -> Assessment:
        X = self.preprocessor.transform(_raw(X_raw, self.axis.size))
        checks = self.estimator.check(X)
        records = checks.records()
        y = np.asarray(checks.y_pred, dtype=np.float64)
        if y.ndim == 2:  # several outputs (CLS concentrations): report this property's column
            names = self.metadata.get("outputs") or [str(j) for j in range(y.shape[1])]
            k = int(self.metadata.get("output_index", 0))
            for rec, row in zip(records, y):
                rec["outputs"] = {name: (None if not np.isfinite(v) else float(v))
                                  for name, v in zip(names, row)}
                rec["y_pred"] = None if not np.isfinite(row[k]) else float(row[k])
            y = y[:, k]
        return Assessment(y, records)

    def summary(self) -> dict[str, Any]:
        return {"settings": self.estimator.state_json(),
                "recipe": self.preprocessor.state_json()["recipe"],
                **{k: v for k, v in self.metadata.items() if k in ("outputs", "output_index",
                                                                   "pure_spectra")}}

    def evidence(self) -> dict[str, Any]:
        return {"axis": self.preprocessor.axis_out_, **self.estimator.evidence(),
                **self._names()}

    def explain(self, X_raw, inputs=None) -> dict[str, Any]:
        X = self.preprocessor.transform(_raw(X_raw, self.axis.size)[:1])
        out = {"axis": self.preprocessor.axis_out_, **self.estimator.explain(X), **self._names()}
        rows = self.metadata.get("calibration_sample_ids")
        if rows is not None and "neighbour_index" in out:
            out["sample_ids"] = [int(rows[i]) for i in out["neighbour_index"]]
        return out

    def _names(self) -> dict[str, Any]:
        """Output names of a multi-output estimator (CLS components) and the reported one."""
        names = self.metadata.get("outputs")
        if not names:
            return {}
        return {"outputs": list(names), "output_index": int(self.metadata.get("output_index", 0))}

    def to_bytes(self) -> bytes:
        extra = {"axis": self.axis}
        extra.update({f"pre/{k}": v for k, v in self.preprocessor.state_arrays().items()})
        meta = {**self.metadata, "recipe": self.preprocessor.state_json()["recipe"]}
        return family_to_bytes(self.estimator, meta, extra)


class DerivedModel(FittedModel):
    """A :class:`~registry.chemometrics.families.DerivedProperty` over input results.

    The spectra are not read: the values come from ``inputs`` (the input properties'
    results for the same spectra). ``axis`` is the calibration set's, kept so that
    every version is checked and deployed the same way.
    """

    family = ModelFamily.DERIVED

    def __init__(self, estimator, axis: np.ndarray, metadata: dict[str, Any] | None = None):
        self.estimator = estimator
        self.axis = np.ascontiguousarray(axis, dtype=np.float64)
        self.metadata = dict(metadata or {})
        self.inputs = tuple(estimator.inputs_)

    def _needed(self, inputs):
        if inputs is None:
            raise InputError(f"a derived property needs the results of {', '.join(self.inputs)}",
                             field="inputs")
        return inputs

    def assess(self, X_raw, inputs=None) -> Assessment:
        checks = self.estimator.check(self._needed(inputs))
        return Assessment(np.asarray(checks.y_pred, dtype=np.float64), checks.records())

    def summary(self) -> dict[str, Any]:
        return {"formula": self.estimator.formula, "inputs": list(self.inputs),
                "input_sep": [None if not np.isfinite(v) else float(v)
                              for v in self.estimator.input_sep_],
                "input_models": self.metadata.get("input_models", {})}

    def evidence(self) -> dict[str, Any]:
        return {**self.estimator.evidence(),
                "input_models": self.metadata.get("input_models", {})}

    def explain(self, X_raw, inputs=None) -> dict[str, Any]:
        return self.estimator.explain(self._needed(inputs))

    def to_bytes(self) -> bytes:
        return family_to_bytes(self.estimator, self.metadata, {"axis": self.axis})


def _document_format(blob: bytes) -> str | None:
    """The artifact's ``format`` name, read from the manifest without trusting it (the
    loader the name picks checks the hash before using anything)."""
    if len(blob) < 16 or blob[:8] != MAGIC:
        raise FormatError("not a model artifact (bad magic bytes)")
    (length,) = struct.unpack("<Q", blob[8:16])
    try:
        doc = json.loads(blob[16:16 + length].decode("utf-8")).get("json")
    except (UnicodeDecodeError, json.JSONDecodeError, AttributeError):
        raise FormatError("model artifact manifest is not valid JSON") from None
    return doc.get("format") if isinstance(doc, dict) else None


def load_fitted(blob: bytes, expected_sha256: str) -> FittedModel:
    """Any stored artifact as a :class:`FittedModel`; the SHA-256 is checked first.

    Raises
    ------
    registry.errors.IntegrityError
        The bytes do not match ``expected_sha256``.
    registry.errors.FormatError
        Not a model artifact of a known format.
    """
    blob = bytes(blob)
    fmt = _document_format(blob)
    if fmt == PLS_FORMAT:
        return PLSModel(TrainedModel.from_bytes(blob, expected_sha256))
    if fmt != FAMILY_FORMAT:
        raise FormatError(f"unknown model artifact format {fmt!r}")
    estimator, metadata, extra = family_from_bytes(blob, expected_sha256)
    if "axis" not in extra:
        raise FormatError("model artifact has no axis")
    axis = extra["axis"]
    if ModelFamily(estimator.family) is ModelFamily.DERIVED:
        return DerivedModel(estimator, axis, metadata)
    pre = {k[len("pre/"):]: v for k, v in extra.items() if k.startswith("pre/")}
    pipeline = SpectralPipeline.from_state(metadata.get("recipe", []), axis, pre)
    return SpectralFamilyModel(estimator, axis, pipeline, metadata)
