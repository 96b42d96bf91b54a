"""PLS1 calibration: fitting, cross-validation, prediction-time checks, validation, artifacts."""

from registry.chemometrics.artifact import TrainedModel, train_model
from registry.chemometrics.crossval import CVResult, cross_validate_pls
from registry.chemometrics.diagnostics import ApplicabilityDomain, DiagnosticsResult
from registry.chemometrics.folds import assign_folds
from registry.chemometrics.pls import PLSRegressor
from registry.chemometrics.validation import (
    AcceptanceCriteria,
    ValidationStatistics,
    validation_statistics,
    verdict,
)

__all__ = [
    "AcceptanceCriteria",
    "ApplicabilityDomain",
    "CVResult",
    "DiagnosticsResult",
    "PLSRegressor",
    "TrainedModel",
    "ValidationStatistics",
    "assign_folds",
    "cross_validate_pls",
    "train_model",
    "validation_statistics",
    "verdict",
]
