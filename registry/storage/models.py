"""The registry's tables.

Registry data is append-mostly: frozen calibration sets, signed records and
audit events are never edited; corrections create new rows that point at the
ones they supersede. Each table documents which columns are content-hashed so
that the audit chain can vouch for them.
"""

from __future__ import annotations

from datetime import datetime
from enum import StrEnum
from typing import Any, Optional

from sqlalchemy import JSON, Column, Index, MetaData, UniqueConstraint
from sqlmodel import Field, SQLModel

from ..chemometrics.family_names import ModelFamily
from ..lifecycle.permissions import Action
from ..lifecycle.states import DeploymentState, ModelState
from .types import Blob, EnumText, LongText, UTCDateTime, enum_check, utcnow

# Named constraints: Alembic batch migrations on SQLite must be able to drop them by name.
SQLModel.metadata.naming_convention = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}
metadata: MetaData = SQLModel.metadata


def _ts(**kw) -> Any:
    return Field(default_factory=utcnow, sa_type=UTCDateTime, **kw)


def _ts_opt(**kw) -> Any:
    return Field(default=None, sa_type=UTCDateTime, **kw)


def _enum(enum: type[StrEnum], length: int = 20, **kw) -> Any:
    """A column holding one of ``enum``'s values; pair it with ``enum_check`` in the table args."""
    return Field(sa_type=EnumText(enum, length), **kw)


def _json(default_factory=dict) -> Any:
    return Field(default_factory=default_factory, sa_column=Column(JSON, nullable=False))


def _json_opt() -> Any:
    return Field(default=None, sa_column=Column(JSON, nullable=True))


# --------------------------------------------------------------------------- organisation
class Site(SQLModel, table=True):
    __tablename__ = "site"
    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(unique=True, max_length=120)
    timezone: str = Field(default="UTC", max_length=64)
    created_at: datetime = _ts()


class Instrument(SQLModel, table=True):
    """An FTIR analyzer; its spectral window and resolution decide which models it can run."""

    __tablename__ = "instrument"
    id: Optional[int] = Field(default=None, primary_key=True)
    serial: str = Field(unique=True, max_length=120)
    site_id: int = Field(foreign_key="site.id", index=True)
    description: str = Field(default="", max_length=200)
    range_high_cm1: float = 4000.0
    range_low_cm1: float = 650.0
    resolution_cm1: float = 4.0
    pathlength_um: float = 50.0
    active: bool = True
    created_at: datetime = _ts()


class InstrumentEvent(SQLModel, table=True):
    """Service, repair or requalification of an instrument (a revalidation trigger)."""

    __tablename__ = "instrument_event"
    id: Optional[int] = Field(default=None, primary_key=True)
    instrument_id: int = Field(foreign_key="instrument.id", index=True)
    kind: str = Field(max_length=40)
    note: str = Field(default="", sa_type=LongText)
    occurred_at: datetime = _ts()
    user_id: Optional[int] = Field(default=None, foreign_key="app_user.id")


class User(SQLModel, table=True):
    __tablename__ = "app_user"
    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(unique=True, max_length=80)
    full_name: str = Field(default="", max_length=200)
    roles: list = _json(list)
    password_hash: str = Field(max_length=300)
    active: bool = True
    created_at: datetime = _ts()


# --------------------------------------------------------------------------- reference data
class Grade(SQLModel, table=True):
    """A product grade (e.g. premium gasoline E10 summer); models are per property and grade."""

    __tablename__ = "grade"
    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(unique=True, max_length=60)
    name: str = Field(default="", max_length=200)
    family: str = Field(default="gasoline", max_length=40)


class Property(SQLModel, table=True):
    __tablename__ = "property"
    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(unique=True, max_length=40)
    name: str = Field(default="", max_length=200)
    unit: str = Field(default="", max_length=40)
    lower_limit: Optional[float] = None
    upper_limit: Optional[float] = None
    decimals: int = 2
    source: str = Field(default="", sa_type=LongText)
    # Overrides of the validation acceptance criteria for this property
    # (field names of registry.chemometrics.AcceptanceCriteria); empty = defaults.
    acceptance: dict = _json()


class ReferenceMethod(SQLModel, table=True):
    """A primary test method for one property, with its precision and what a test costs.

    ``repeatability`` and ``reproducibility`` are JSON precision specs:
    ``{"kind": "constant", "value": v}`` or ``{"kind": "linear", "a": a, "b": b}``
    meaning a + b·X at level X, or ``{"kind": "points", "x": [...], "y": [...]}``
    interpolated linearly.
    """

    __tablename__ = "reference_method"
    __table_args__ = (UniqueConstraint("code", "property_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(max_length=60)
    property_id: int = Field(foreign_key="property.id", index=True)
    name: str = Field(default="", max_length=200)
    repeatability: dict = _json()
    reproducibility: dict = _json()
    cost: float = 0.0
    currency: str = Field(default="USD", max_length=8)
    turnaround_days: int = 1
    source: str = Field(default="", sa_type=LongText)
    active: bool = True


# --------------------------------------------------------------------------- samples and data
class Sample(SQLModel, table=True):
    __tablename__ = "sample"
    __table_args__ = (UniqueConstraint("site_id", "external_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    site_id: int = Field(foreign_key="site.id", index=True)
    external_id: str = Field(max_length=120, index=True)
    grade_id: Optional[int] = Field(default=None, foreign_key="grade.id", index=True)
    taken_at: Optional[datetime] = _ts_opt()
    batch: str = Field(default="", max_length=120)
    source: str = Field(default="", max_length=200)
    created_at: datetime = _ts()


class SpectralAxis(SQLModel, table=True):
    """An x axis shared by every spectrum measured on it; stored once, keyed by its hash."""

    __tablename__ = "spectral_axis"
    id: Optional[int] = Field(default=None, primary_key=True)
    unit: str = Field(default="1/CM", max_length=20)
    n_points: int
    first_x: float
    last_x: float
    values: bytes = Field(sa_type=Blob)  # float64 little-endian, ascending
    sha256: str = Field(unique=True, max_length=64)


class Spectrum(SQLModel, table=True):
    """One absorbance spectrum; ``sha256`` covers the axis values and the float32 data."""

    __tablename__ = "spectrum"
    id: Optional[int] = Field(default=None, primary_key=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    instrument_id: int = Field(foreign_key="instrument.id", index=True)
    axis_id: int = Field(foreign_key="spectral_axis.id", index=True)
    acquired_at: datetime = _ts(index=True)
    data: bytes = Field(sa_type=Blob)  # float32 little-endian absorbance
    sha256: str = Field(unique=True, max_length=64)
    source_file: str = Field(default="", max_length=400)
    operator: str = Field(default="", max_length=120)
    imported_by_id: Optional[int] = Field(default=None, foreign_key="app_user.id")
    created_at: datetime = _ts()


class ResultStatus(StrEnum):
    """Standing of one reference result."""

    VALID = "valid"
    SUSPECT = "suspect"  # held out of calibration until a reviewer resolves it
    REJECTED = "rejected"  # a reviewer excluded it
    SUPERSEDED = "superseded"  # a correction replaced it


class ReferenceResult(SQLModel, table=True):
    """A primary-test-method result. Corrections create a new row (``supersedes_id``)."""

    __tablename__ = "reference_result"
    __table_args__ = (Index("ix_reference_result_sample_method", "sample_id", "method_id"),
                      enum_check("status", ResultStatus))
    id: Optional[int] = Field(default=None, primary_key=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    method_id: int = Field(foreign_key="reference_method.id", index=True)
    value: float
    lab: str = Field(default="", max_length=120)
    tested_at: datetime = _ts()
    operator: str = Field(default="", max_length=120)
    comment: str = Field(default="", sa_type=LongText)
    status: ResultStatus = _enum(ResultStatus, default=ResultStatus.VALID, index=True)
    status_reason: str = Field(default="", sa_type=LongText)
    supersedes_id: Optional[int] = Field(default=None, foreign_key="reference_result.id")
    selection_pick_id: Optional[int] = Field(default=None, foreign_key="selection_pick.id", index=True)
    sha256: str = Field(max_length=64)
    imported_by_id: Optional[int] = Field(default=None, foreign_key="app_user.id")
    created_at: datetime = _ts()


# --------------------------------------------------------------------------- selection
class SelectionRun(SQLModel, table=True):
    """A lab manager's decision of which samples to send for reference testing."""

    __tablename__ = "selection_run"
    id: Optional[int] = Field(default=None, primary_key=True)
    created_at: datetime = _ts()
    user_id: int = Field(foreign_key="app_user.id")
    method: str = Field(max_length=40)
    parameters: dict = _json()
    property_codes: list = _json(list)
    grade_id: Optional[int] = Field(default=None, foreign_key="grade.id")
    model_version_id: Optional[int] = Field(default=None, foreign_key="model_version.id")
    pool_sha256: str = Field(max_length=64)
    pool_size: int = 0
    budget: Optional[float] = None
    total_cost: float = 0.0
    state: str = Field(default="open", max_length=20)  # open, answered, closed
    benefit: dict = _json()


class SelectionPick(SQLModel, table=True):
    __tablename__ = "selection_pick"
    __table_args__ = (UniqueConstraint("run_id", "sample_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    run_id: int = Field(foreign_key="selection_run.id", index=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    rank: int
    cost: float = 0.0
    cumulative_cost: float = 0.0
    reason: str = Field(default="", sa_type=LongText)
    rationale: dict = _json()


# --------------------------------------------------------------------------- calibration sets
class CalibrationSet(SQLModel, table=True):
    """A frozen list of samples and the reference values used, with its content hash."""

    __tablename__ = "calibration_set"
    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(unique=True, max_length=120)
    property_id: int = Field(foreign_key="property.id", index=True)
    grade_id: Optional[int] = Field(default=None, foreign_key="grade.id", index=True)
    description: str = Field(default="", sa_type=LongText)
    validation_rule: str = Field(default="", max_length=120)
    n_cal: int = 0
    n_val: int = 0
    frozen: bool = True
    sha256: str = Field(max_length=64)
    created_by_id: int = Field(foreign_key="app_user.id")
    created_at: datetime = _ts()


class CalibrationMember(SQLModel, table=True):
    __tablename__ = "calibration_member"
    __table_args__ = (UniqueConstraint("set_id", "sample_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    set_id: int = Field(foreign_key="calibration_set.id", index=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    role: str = Field(max_length=8)  # cal or val
    reference_value: float
    reference_result_ids: list = _json(list)
    spectrum_ids: list = _json(list)


# --------------------------------------------------------------------------- models
class ModelVersion(SQLModel, table=True):
    """A trained model: recipe, chosen size, CV curve and a hashed array artifact."""

    __tablename__ = "model_version"
    __table_args__ = (enum_check("state", ModelState), enum_check("family", ModelFamily))
    id: Optional[int] = Field(default=None, primary_key=True)
    label: str = Field(unique=True, max_length=120)
    property_id: int = Field(foreign_key="property.id", index=True)
    grade_id: Optional[int] = Field(default=None, foreign_key="grade.id", index=True)
    family: ModelFamily = _enum(ModelFamily, 40, default=ModelFamily.PLS)
    recipe: list = _json(list)
    n_components: int = 0
    cv: dict = _json()
    artifact: bytes = Field(sa_type=Blob)
    artifact_sha256: str = Field(max_length=64)
    axis_id: int = Field(foreign_key="spectral_axis.id")
    parent_id: Optional[int] = Field(default=None, foreign_key="model_version.id")
    calibration_set_id: int = Field(foreign_key="calibration_set.id", index=True)
    state: ModelState = _enum(ModelState, default=ModelState.DRAFT, index=True)
    author_id: int = Field(foreign_key="app_user.id")
    created_at: datetime = _ts()
    last_validated_at: Optional[datetime] = _ts_opt()


class ModelStateChange(SQLModel, table=True):
    __tablename__ = "model_state_change"
    __table_args__ = (enum_check("from_state", ModelState), enum_check("to_state", ModelState))
    id: Optional[int] = Field(default=None, primary_key=True)
    model_version_id: int = Field(foreign_key="model_version.id", index=True)
    from_state: ModelState = _enum(ModelState)
    to_state: ModelState = _enum(ModelState)
    user_id: int = Field(foreign_key="app_user.id")
    reason: str = Field(default="", sa_type=LongText)
    signature_id: Optional[int] = Field(default=None, foreign_key="signature.id")
    occurred_at: datetime = _ts()


class ValidationRecord(SQLModel, table=True):
    """One validation: statistics, the criteria applied, the verdict.

    ``sep`` is the SEP, the bias-corrected standard deviation of the errors (ISO 12099),
    ``rmsep`` the root mean square error, ``sep_over_sigma_r`` = SEP/(R/2.77). Before
    revision 0003 ``sep`` held the RMSEP and a ``sdv`` column the SEP; the migration moved
    the SEP into ``sep``. The hashed ``statistics`` and ``criteria`` JSON keep the layout
    they were written with (see ``registry.chemometrics.validation.statistics_from_json``).
    """

    __tablename__ = "validation_record"
    id: Optional[int] = Field(default=None, primary_key=True)
    model_version_id: int = Field(foreign_key="model_version.id", index=True)
    calibration_set_id: int = Field(foreign_key="calibration_set.id")
    user_id: int = Field(foreign_key="app_user.id")
    kind: str = Field(default="initial", max_length=20)  # initial, local, general
    n: int
    bias: float
    sep: float
    rmsep: float
    slope: float
    intercept: float
    r2: float
    bias_t: float
    bias_p: float
    sep_over_sigma_r: Optional[float] = None
    passed: bool
    criteria: dict = _json()
    statistics: dict = _json()
    reasons: list = _json(list)
    sha256: str = Field(max_length=64)
    created_at: datetime = _ts()


class Signature(SQLModel, table=True):
    """An electronic signature: who, meaning, why, when, and the hash of what was signed."""

    __tablename__ = "signature"
    id: Optional[int] = Field(default=None, primary_key=True)
    user_id: int = Field(foreign_key="app_user.id", index=True)
    meaning: str = Field(max_length=120)
    reason: str = Field(default="", sa_type=LongText)
    signed_at: datetime = _ts()
    entity_type: str = Field(max_length=40)
    entity_id: int
    signed_parts: dict = _json()
    signed_sha256: str = Field(max_length=64)


class Deployment(SQLModel, table=True):
    __tablename__ = "deployment"
    __table_args__ = (Index("ix_deployment_instrument_state", "instrument_id", "state"),
                      enum_check("state", DeploymentState))
    id: Optional[int] = Field(default=None, primary_key=True)
    model_version_id: int = Field(foreign_key="model_version.id", index=True)
    instrument_id: int = Field(foreign_key="instrument.id", index=True)
    state: DeploymentState = _enum(DeploymentState, default=DeploymentState.ACTIVE)
    deployed_at: datetime = _ts()
    deployed_by_id: int = Field(foreign_key="app_user.id")
    ended_at: Optional[datetime] = _ts_opt()
    signature_id: Optional[int] = Field(default=None, foreign_key="signature.id")


class RevalidationPolicy(SQLModel, table=True):
    __tablename__ = "revalidation_policy"
    __table_args__ = (UniqueConstraint("property_id", "grade_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    property_id: int = Field(foreign_key="property.id")
    grade_id: Optional[int] = Field(default=None, foreign_key="grade.id")
    interval_days: int = 365
    coverage_window_days: int = 30
    coverage_threshold: float = 0.2
    coverage_min_count: int = 10


class RevalidationTrigger(SQLModel, table=True):
    """Something that makes a model due for revalidation now (QC signal, drift, service...)."""

    __tablename__ = "revalidation_trigger"
    id: Optional[int] = Field(default=None, primary_key=True)
    model_version_id: int = Field(foreign_key="model_version.id", index=True)
    kind: str = Field(max_length=40)
    detail: dict = _json()
    raised_at: datetime = _ts()
    cleared_at: Optional[datetime] = _ts_opt()
    cleared_by_id: Optional[int] = Field(default=None, foreign_key="app_user.id")
    clear_reason: str = Field(default="", sa_type=LongText)


class QCResult(SQLModel, table=True):
    """A control material measured on an instrument with the active model."""

    __tablename__ = "qc_result"
    __table_args__ = (Index("ix_qc_result_chart", "instrument_id", "material", "property_id"),)
    id: Optional[int] = Field(default=None, primary_key=True)
    instrument_id: int = Field(foreign_key="instrument.id", index=True)
    model_version_id: Optional[int] = Field(default=None, foreign_key="model_version.id", index=True)
    property_id: int = Field(foreign_key="property.id")
    material: str = Field(max_length=120)
    known_value: Optional[float] = None
    measured_value: float
    measured_at: datetime = _ts()
    user_id: int = Field(foreign_key="app_user.id")
    signals: list = _json(list)


class Prediction(SQLModel, table=True):
    __tablename__ = "prediction"
    id: Optional[int] = Field(default=None, primary_key=True)
    spectrum_id: int = Field(foreign_key="spectrum.id", index=True)
    model_version_id: int = Field(foreign_key="model_version.id", index=True)
    instrument_id: Optional[int] = Field(default=None, foreign_key="instrument.id")
    value: float
    diagnostics: dict = _json()
    flags: list = _json(list)
    predicted_at: datetime = _ts(index=True)
    user_id: int = Field(foreign_key="app_user.id")


class AuditEvent(SQLModel, table=True):
    """One link of the append-only hash chain; ``id`` is the sequence number.

    ``payload`` is stored as the exact canonical JSON text that was hashed
    (never as JSONB, which would reorder keys).
    """

    __tablename__ = "audit_event"
    __table_args__ = (Index("ix_audit_event_entity", "entity_type", "entity_id"),
                      enum_check("action", Action))
    id: Optional[int] = Field(default=None, primary_key=True)
    occurred_at: datetime = _ts()
    user_id: Optional[int] = Field(default=None, foreign_key="app_user.id")
    user_name: str = Field(default="", max_length=80)
    action: Action = _enum(Action, 60, index=True)
    entity_type: str = Field(default="", max_length=40)
    entity_id: Optional[int] = None
    payload: str = Field(sa_type=LongText)
    prev_hash: str = Field(max_length=64)
    hash: str = Field(unique=True, max_length=64)


class RegistryMeta(SQLModel, table=True):
    """Key/value facts about the registry itself (e.g. that it is a demo registry)."""

    __tablename__ = "registry_meta"
    key: str = Field(primary_key=True, max_length=80)
    value: str = Field(default="", sa_type=LongText)


ENTITY_TABLES = {
    "sites": Site, "instruments": Instrument, "instrument_events": InstrumentEvent,
    "users": User, "grades": Grade, "properties": Property,
    "reference_methods": ReferenceMethod, "samples": Sample, "spectral_axes": SpectralAxis,
    "spectra": Spectrum, "reference_results": ReferenceResult, "selection_runs": SelectionRun,
    "selection_picks": SelectionPick, "calibration_sets": CalibrationSet,
    "calibration_members": CalibrationMember, "model_versions": ModelVersion,
    "model_state_changes": ModelStateChange, "validation_records": ValidationRecord,
    "signatures": Signature, "deployments": Deployment,
    "revalidation_policies": RevalidationPolicy, "revalidation_triggers": RevalidationTrigger,
    "qc_results": QCResult, "predictions": Prediction, "audit_events": AuditEvent,
}
