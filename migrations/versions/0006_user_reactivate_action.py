"""audit action names: 'user_reactivate' (an admin unlocks a locked account)

Revision ID: 0006
Revises: 0005
Create Date: 2027-02-08

Alembic does not compare CHECK constraints, so the new member of the audit ``Action``
enum needs this hand-written revision: it replaces ``ck_audit_event_action`` with the
list 0004 wrote plus the new name (written out, as in 0004, so that this revision keeps
its meaning when a later one adds an action). On SQLite the constraint changes by a
batch rebuild of ``audit_event``, which drops its append-only triggers (revision 0002);
they are dropped first and created again afterwards, exactly as 0002 wrote them.
"""
from typing import Sequence, Union

from alembic import op

from registry.storage import append_only

revision: str = "0006"
down_revision: Union[str, None] = "0005"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

_ACTIONS_0004 = (
    "user_add", "user_deactivate", "site_add", "instrument_add", "instrument_event", "grade_add",
    "property_edit", "method_edit", "import_spectra", "import_references", "export_data",
    "correct_reference", "resolve_suspect_reference", "selection_run", "calset_create",
    "model_train", "model_validate", "model_submit", "model_approve", "model_reject",
    "model_activate", "model_retire", "predict", "qc_add", "qc_clear_signal", "policy_edit",
    "trigger_raise", "view", "audit_verify", "trace", "selection_close", "trigger_clear",
    "catalog_seed")
_ACTIONS = _ACTIONS_0004 + ("user_reactivate",)
_NAME = "ck_audit_event_action"


def upgrade() -> None:
    _replace_check(_ACTIONS)


def downgrade() -> None:
    # The audit trail is append-only: a trail that already records a reactivation cannot
    # go back to this list, and the engine refuses the narrower CHECK rather than lose it.
    _replace_check(_ACTIONS_0004)


def _replace_check(names: tuple[str, ...]) -> None:
    listed = ", ".join(f"'{n}'" for n in names)
    with append_only.lifted_for_sqlite_rebuild():
        with op.batch_alter_table("audit_event") as batch:
            batch.drop_constraint(op.f(_NAME), type_="check")
            batch.create_check_constraint(op.f(_NAME), f"action IN ({listed})")

