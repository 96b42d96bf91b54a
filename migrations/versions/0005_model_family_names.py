"""model families: model_version.family is a closed name with a CHECK; 'pls1' becomes 'pls'

Revision ID: 0005
Revises: 0004
Create Date: 2027-02-01

Before this revision every version was a PLS1 model and the column held the free
text 'pls1'. The registry now knows several families (PLS, band, classical least
squares, derived property, neighbour look-up), so the column gets a CHECK listing
them, written out here (as in 0004) so that this revision keeps its meaning when a
later one adds a family. Existing rows are renamed 'pls1' -> 'pls' first.
"""
from typing import Sequence, Union

from alembic import op

revision: str = "0005"
down_revision: Union[str, None] = "0004"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

_FAMILIES = ("pls", "band", "cls", "derived", "neighbours")


def _listed(names) -> str:
    return ", ".join(f"'{n}'" for n in names)


def upgrade() -> None:
    op.execute("UPDATE model_version SET family = 'pls' WHERE family = 'pls1'")
    with op.batch_alter_table("model_version") as batch:
        batch.create_check_constraint(op.f("ck_model_version_family"),
                                      f"family IN ({_listed(_FAMILIES)})")


def downgrade() -> None:
    with op.batch_alter_table("model_version") as batch:
        batch.drop_constraint(op.f("ck_model_version_family"), type_="check")
    op.execute("UPDATE model_version SET family = 'pls1' WHERE family = 'pls'")
