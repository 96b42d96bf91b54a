"""What may leave the registry of each stored record (``--format json``): an allow-list per table.

A column appears in output only once it is named here, so a column added later
(a token, a key, a blob) stays out of every JSON document until someone decides
it belongs there. Password hashes, spectra and model artifacts are never listed.
"""

from __future__ import annotations

from pathlib import PurePath
from typing import Any

from sqlmodel import SQLModel

from .models import (Grade, Instrument, InstrumentEvent, Property, ReferenceMethod,
                              ReferenceResult, RevalidationPolicy, RevalidationTrigger,
                              SelectionRun, Site, User, ValidationRecord)

RECORD_FIELDS: dict[type[SQLModel], tuple[str, ...]] = {
    User: ("id", "name", "full_name", "roles", "active", "created_at"),
    Site: ("id", "name", "timezone", "created_at"),
    Instrument: ("id", "serial", "site_id", "description", "range_high_cm1", "range_low_cm1",
                 "resolution_cm1", "pathlength_um", "active", "created_at"),
    InstrumentEvent: ("id", "instrument_id", "kind", "note", "occurred_at", "user_id"),
    Grade: ("id", "code", "name", "family"),
    Property: ("id", "code", "name", "unit", "lower_limit", "upper_limit", "decimals", "source",
               "acceptance"),
    ReferenceMethod: ("id", "code", "property_id", "name", "repeatability", "reproducibility",
                      "cost", "currency", "turnaround_days", "source", "active"),
    ReferenceResult: ("id", "sample_id", "method_id", "value", "lab", "tested_at", "operator",
                      "comment", "status", "status_reason", "supersedes_id", "selection_pick_id",
                      "sha256", "imported_by_id", "created_at"),
    ValidationRecord: ("id", "model_version_id", "calibration_set_id", "user_id", "kind", "n",
                       "bias", "sep", "rmsep", "slope", "intercept", "r2", "bias_t",
                       "bias_p", "sep_over_sigma_r", "passed", "criteria", "statistics", "reasons",
                       "sha256", "created_at"),
    RevalidationPolicy: ("id", "property_id", "grade_id", "interval_days", "coverage_window_days",
                         "coverage_threshold", "coverage_min_count"),
    RevalidationTrigger: ("id", "model_version_id", "kind", "detail", "raised_at", "cleared_at",
                          "cleared_by_id", "clear_reason"),
    SelectionRun: ("id", "created_at", "user_id", "method", "parameters", "property_codes",
                   "grade_id", "model_version_id", "pool_sha256", "pool_size", "budget",
                   "total_cost", "state", "benefit"),
}


def output_record(obj: Any) -> Any:
    """The printable form of an object :func:`registry.plain_json.plain_json` does not know:
    a stored record as a dict of its allow-listed fields, a path as text.

    Raises
    ------
    TypeError
        For a record kind without an allow-list (it must be added here first) or any
        other object.
    """
    if isinstance(obj, SQLModel):
        fields = RECORD_FIELDS.get(type(obj))
        if fields is None:
            raise TypeError(f"no output allow-list for {type(obj).__name__} records "
                            "(registry/storage/output_fields.py)")
        return {name: getattr(obj, name) for name in fields}
    if isinstance(obj, PurePath):
        return str(obj)
    raise TypeError(f"a {type(obj).__name__} has no JSON output form")
