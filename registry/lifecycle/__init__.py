"""Pure lifecycle rules: model states, permissions, signatures, QC charts, revalidation dates.

Nothing here touches the database; the services in :mod:`registry.services`
call these functions inside their transactions.
"""

from registry.lifecycle.permissions import PERMISSIONS, Action, Role, require
from registry.lifecycle.qc_charts import Signal, evaluate, ewma_chart, individuals_mr_chart
from registry.lifecycle.revalidation_rules import coverage_drift, due_date, due_status, to_site_time
from registry.lifecycle.signatures import (
    SIGNATURE_MEANINGS,
    SignatureRecord,
    canonical_json,
    signed_content_hash,
)
from registry.lifecycle.states import (
    TRANSITIONS,
    LifecycleAction,
    ModelState,
    check_separation_of_duties,
    check_transition,
)

__all__ = [
    "PERMISSIONS", "Action", "Role", "require",
    "Signal", "evaluate", "ewma_chart", "individuals_mr_chart",
    "coverage_drift", "due_date", "due_status", "to_site_time",
    "SIGNATURE_MEANINGS", "SignatureRecord", "canonical_json", "signed_content_hash",
    "TRANSITIONS", "LifecycleAction", "ModelState", "check_separation_of_duties",
    "check_transition",
]
