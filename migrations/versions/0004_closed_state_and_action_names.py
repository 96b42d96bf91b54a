"""closed names: CHECK on model and deployment states, result statuses and audit actions

Revision ID: 0004
Revises: 0003
Create Date: 2027-01-18

The columns stay VARCHAR (no native PostgreSQL ENUM types); each gets a CHECK
listing the names the registry knows at this revision. The lists are written
out here rather than imported, so that this revision keeps meaning what it
meant when a later one changes an enum (that later revision replaces the CHECK).

On SQLite a constraint is added by rebuilding the table (batch mode). Rebuilding
``audit_event`` drops its append-only triggers (revision 0002), so they are
dropped first and created again afterwards, exactly as 0002 wrote them.
"""
from typing import Sequence, Union

from alembic import op

from registry.storage import append_only

revision: str = "0004"
down_revision: Union[str, None] = "0003"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

_MODEL_STATES = ("draft", "validated", "in_review", "approved", "active", "retired",
                 "superseded", "rejected")
_DEPLOYMENT_STATES = ("active", "superseded", "retired")
_RESULT_STATUSES = ("valid", "suspect", "rejected", "superseded")
_AUDIT_ACTIONS = (
    "user_add", "user_deactivate", "site_add", "instrument_add", "instrument_event", "grade_add",
    "property_edit", "method_edit", "import_spectra", "import_references", "export_data",
    "correct_reference", "resolve_suspect_reference", "selection_run", "calset_create",
    "model_train", "model_validate", "model_submit", "model_approve", "model_reject",
    "model_activate", "model_retire", "predict", "qc_add", "qc_clear_signal", "policy_edit",
    "trigger_raise", "view", "audit_verify", "trace", "selection_close", "trigger_clear",
    "catalog_seed")

#: table -> [(column, allowed names)]; the constraint is named ck_<table>_<column>.
_CHECKS = {
    "model_version": [("state", _MODEL_STATES)],
    "model_state_change": [("from_state", _MODEL_STATES), ("to_state", _MODEL_STATES)],
    "deployment": [("state", _DEPLOYMENT_STATES)],
    "reference_result": [("status", _RESULT_STATUSES)],
    "audit_event": [("action", _AUDIT_ACTIONS)],
}


def upgrade() -> None:
    with append_only.lifted_for_sqlite_rebuild():
        for table, checks in _CHECKS.items():
            with op.batch_alter_table(table) as batch:
                for column, names in checks:
                    listed = ", ".join(f"'{n}'" for n in names)
                    batch.create_check_constraint(op.f(f"ck_{table}_{column}"),
                                                  f"{column} IN ({listed})")


def downgrade() -> None:
    with append_only.lifted_for_sqlite_rebuild():
        for table, checks in _CHECKS.items():
            with op.batch_alter_table(table) as batch:
                for column, _ in checks:
                    batch.drop_constraint(op.f(f"ck_{table}_{column}"), type_="check")

