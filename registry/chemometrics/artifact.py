"""Trained model artifacts: recipe + fitted state + PLS + diagnostics, as plain arrays.

A :class:`TrainedModel` serialises to a deterministic byte string (see
:mod:`registry.chemometrics.container`): a JSON manifest (recipe, limits,
metadata, CV summary) and little-endian float64/int64 arrays. Loading checks
the SHA-256 first and never unpickles. A loaded model predicts bit-identically
because every prediction runs the same arithmetic on the same stored numbers.

Cross-validation inside :func:`train_model`: when the recipe has a
data-dependent step (``msc``, ``mean_center``) the recipe is fitted on each
training fold and applied to its test fold, so the test fold never influences
its own preprocessing; a recipe of row-wise steps only (region, snv, savgol,
baseline) gives the same result preprocessed once, which is what is done then.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from registry.chemometrics.container import pack, unpack
from registry.lineage.canonical import sha256_hex
from registry.chemometrics.crossval import CVResult, cross_validate_pls
from registry.chemometrics.diagnostics import ApplicabilityDomain, DiagnosticsResult
from registry.chemometrics.folds import assign_folds
from registry.chemometrics.pls import PLSRegressor, check_xy
from registry.errors import FormatError, InputError, IntegrityError
from registry.spectra.preprocessing import Recipe, SpectralPipeline

FORMAT = "specledger-pls-model"
VERSION = 1
_CV_ARRAYS = ("rmsecv", "press", "predictions", "fold_of_sample", "fold_mse", "f_ratio", "f_test_p")
_CV_SCALARS = ("selected_components", "selection_rule", "haaland_thomas_components",
               "one_se_components", "min_press_components", "alpha", "method", "n_folds")


class TrainedModel:
    """A fitted preprocessing + PLS1 + applicability-domain model.

    Parameters
    ----------
    axis : ndarray (k,)
        Axis (cm⁻¹, ascending float64) the raw spectra must be on.
    preprocessor : SpectralPipeline
        Fitted.
    pls : PLSRegressor
        Fitted with exactly the chosen number of components.
    domain : ApplicabilityDomain
        Fitted on the preprocessed calibration spectra.
    metadata : dict
        JSON-able: property name, units, training choices, anything else.
    cv : CVResult, optional
    """

    def __init__(self, axis: np.ndarray, preprocessor: SpectralPipeline, pls: PLSRegressor,
                 domain: ApplicabilityDomain, metadata: dict[str, Any] | None = None,
                 cv: CVResult | None = None):
        self.axis = np.ascontiguousarray(axis, dtype=np.float64)
        self.preprocessor = preprocessor
        self.pls = pls
        self.domain = domain
        self.metadata = dict(metadata or {})
        self.cv = cv

    @property
    def n_components(self) -> int:
        return int(self.pls.coef_.shape[0])

    @property
    def recipe(self) -> list[dict[str, Any]]:
        return Recipe.from_json(self.preprocessor.recipe).to_json()

    def predict(self, X_raw) -> tuple[np.ndarray, DiagnosticsResult]:
        """Predict raw spectra on the model axis; returns (y, diagnostics)."""
        X_raw = np.asarray(X_raw, dtype=np.float64)
        if X_raw.ndim == 1:
            X_raw = X_raw[None, :]
        if X_raw.ndim != 2 or X_raw.shape[1] != self.axis.shape[0]:
            raise InputError(f"spectra must have {self.axis.shape[0]} points on the model axis, "
                             f"got shape {X_raw.shape}", field="X")
        return self.predict_preprocessed(self.preprocessor.transform(X_raw))

    def predict_preprocessed(self, X_pre) -> tuple[np.ndarray, DiagnosticsResult]:
        """As :meth:`predict`, for spectra already through the model's own recipe (a caller
        that needs the preprocessed spectra as well does not preprocess twice)."""
        y = self.pls.predict(X_pre)
        return y, self.domain.assess(X_pre, y)

    # -------------------------------------------------------------- bytes
    def to_bytes(self) -> bytes:
        arrays: dict[str, np.ndarray] = {"axis": self.axis}
        arrays.update({f"pre/{k}": v for k, v in self.preprocessor.state_arrays().items()})
        arrays.update({f"pls/{k}": v for k, v in self.pls.state_arrays().items()})
        arrays.update({f"ad/{k}": v for k, v in self.domain.state_arrays().items()})
        document: dict[str, Any] = {
            "format": FORMAT, "version": VERSION,
            "recipe": self.recipe,
            "pls": {"n_components": self.n_components,
                    "n_stable_components": int(self.pls.n_stable_components_)},
            "diagnostics": self.domain.state_json(),
            "metadata": self.metadata,
            "cv": None,
        }
        if self.cv is not None:
            arrays.update({f"cv/{k}": getattr(self.cv, k) for k in _CV_ARRAYS})
            document["cv"] = {k: getattr(self.cv, k) for k in _CV_SCALARS}
            document["cv"]["extra"] = self.cv.extra
        # fail here, not at load time, if metadata is not plain JSON
        json.dumps(document, allow_nan=False)
        return pack(arrays, document)

    @property
    def sha256(self) -> str:
        return sha256_hex(self.to_bytes())

    @classmethod
    def from_bytes(cls, blob: bytes, expected_sha256: str) -> "TrainedModel":
        """Load an artifact; the SHA-256 is checked before anything is parsed.

        Raises
        ------
        registry.errors.IntegrityError
            The bytes do not match ``expected_sha256``.
        registry.errors.FormatError
            The bytes are not a model artifact of a known version.
        """
        if not expected_sha256:
            raise InputError("an expected SHA-256 is required to load a model",
                             field="expected_sha256")
        arrays, doc = unpack(bytes(blob), expected_sha256)
        if not isinstance(doc, dict) or doc.get("format") != FORMAT or doc.get("version") != VERSION:
            raise FormatError("not a model artifact of a supported version")
        axis = arrays["axis"]

        def part(prefix: str) -> dict[str, np.ndarray]:
            return {k[len(prefix):]: v for k, v in arrays.items() if k.startswith(prefix)}

        pre = SpectralPipeline.from_state(doc["recipe"], axis, part("pre/"))
        pls = PLSRegressor.from_state(part("pls/"), doc["pls"]["n_stable_components"])
        domain = ApplicabilityDomain.from_state(part("ad/"), doc["diagnostics"])
        cv = None
        if doc.get("cv") is not None:
            cv_arrays = part("cv/")
            cv = CVResult(**{k: cv_arrays[k] for k in _CV_ARRAYS},
                          **{k: doc["cv"][k] for k in _CV_SCALARS},
                          extra=doc["cv"].get("extra", {}))
        return cls(axis, pre, pls, domain, doc.get("metadata"), cv)


def train_model(X_raw, y, axis, recipe, max_components: int = 20, folds: int = 10,
                groups=None, n_components: int | None = None,
                selection: str = "haaland-thomas", *, method: str = "venetian",
                random_state=None, alpha: float = 0.75, confidence: float = 0.95,
                residual_test: str = "q-limit", q_limit_method: str = "box",
                metadata: dict[str, Any] | None = None) -> TrainedModel:
    """Recipe fit → cross-validation → final fit → diagnostics → :class:`TrainedModel`.

    ``max_components`` is lowered to what the smallest training fold and the
    preprocessed width allow (min(n_train − 1, k)); the value used is stored
    in ``metadata["max_components"]`` and is the length of the CV curve.

    Parameters
    ----------
    X_raw : ndarray (n, k)
        Raw spectra on ``axis``.
    y : ndarray (n,)
    axis : ndarray (k,)
    recipe : list of dict or Recipe
    max_components, folds, groups, n_components, selection, method,
    random_state, alpha
        As :func:`registry.chemometrics.cross_validate_pls`.
    confidence, residual_test, q_limit_method
        As :class:`registry.chemometrics.diagnostics.ApplicabilityDomain`.
    metadata : dict, optional
        JSON-able extras (property name, units, ...).
    """
    recipe = Recipe.from_json(recipe, axis)  # every parameter checked before fitting
    X_raw, y = check_xy(X_raw, y)
    axis = np.asarray(axis, dtype=np.float64)
    if X_raw.shape[1] != axis.shape[0]:
        raise InputError(f"spectra have {X_raw.shape[1]} points but the axis has "
                         f"{axis.shape[0]}", field="X")
    fold_of_sample = assign_folds(X_raw.shape[0], folds, groups, method=method,
                                  random_state=random_state)
    largest_fold = int(np.bincount(fold_of_sample).max())
    width = recipe.output_axis(axis).shape[0]
    feasible = min(X_raw.shape[0] - largest_fold - 1, width)
    if feasible < 1:
        raise InputError("too few samples for cross-validation", field="X")
    a_max = min(int(max_components), feasible)

    pipeline = recipe.build(axis)
    cv_kwargs = dict(method=method, random_state=random_state, selection=selection,
                     alpha=alpha, n_components=n_components)
    if recipe.is_row_wise:
        cv = cross_validate_pls(pipeline.fit_transform(X_raw), y, a_max, folds, groups, **cv_kwargs)
    else:
        cv = cross_validate_pls(X_raw, y, a_max, folds, groups, preprocessor=pipeline, **cv_kwargs)
    cv.extra["preprocessing_in_folds"] = not recipe.is_row_wise

    A = cv.selected_components
    X_pre = pipeline.fit_transform(X_raw)
    pls = PLSRegressor(n_components=A).fit(X_pre, y)
    domain = ApplicabilityDomain(confidence=confidence, residual_test=residual_test,
                                  q_limit_method=q_limit_method).fit(X_pre, pls, y)
    meta = {
        **(metadata or {}),
        "n_components": A,
        "max_components": a_max,
        "n_calibration": int(X_raw.shape[0]),
        "n_groups": None if groups is None else int(np.unique(np.asarray(groups)).size),
        "calibration_rmse": float(np.sqrt(np.mean((pls.predict(X_pre) - y) ** 2))),
        "rmsecv": float(cv.rmsecv[A - 1]),
    }
    return TrainedModel(axis, pipeline, pls, domain, meta, cv)


def q_limit_of(blob: bytes, expected_sha256: str) -> dict[str, Any] | None:
    """How a stored model's Q-residual limit was obtained: form, h0, g, h, θ source, note
    (:meth:`ApplicabilityDomain.q_limit_record`); None when the artifact does not verify
    against its hash or cannot be read."""
    try:
        return TrainedModel.from_bytes(bytes(blob), expected_sha256).domain.q_limit_record()
    except (IntegrityError, InputError):
        return None
