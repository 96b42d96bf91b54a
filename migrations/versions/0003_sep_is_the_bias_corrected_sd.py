"""validation records: ``sep`` is the SEP; precision ratio against σ_R = R/2.77

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-04

Before this revision ``validation_record.sep`` held the RMSEP (root mean square of the
prediction errors, also in ``rmsep``) and ``sdv`` held the bias-corrected standard
deviation of the errors, which is the SEP (ISO 12099:2017; Næs et al., A User-Friendly
Guide to Multivariate Calibration and Classification, 2002). ``sep_over_r`` was RMSEP/R,
a standard deviation over a 95 % difference limit (R = 2.77·σ_R, ISO 5725-6).

Upgrade
    * ``sep`` := ``sdv`` (the stored SEP), then ``sdv`` is dropped: the old ``sep`` value
      was the RMSEP, which ``rmsep`` already holds, so no number is lost and no column
      is left that names the same quantity twice.
    * ``sep_over_r`` is replaced by ``sep_over_sigma_r`` = SEP/(R/2.77), with R read from
      the record's stored statistics (``reproducibility``).
    * property acceptance overrides: ``max_sep_over_reproducibility`` becomes
      ``max_sep_over_sigma_r`` with the same factor (the factor keeps its meaning, "k times
      the reference method's precision"; the precision is now measured as σ_R).

Untouched, on purpose: the hashed ``statistics``, ``criteria``, ``reasons`` and
``passed`` of every record (the content hash, the audit chain and any signature cover
them, so ``audit verify`` still passes), and the audit events themselves (append-only).
Old records keep their layout-1 statistics JSON and their old criteria; the registry
reads both (``registry.chemometrics.validation.statistics_from_json`` and
``rule_text``).

Downgrade restores ``sdv``, ``sep`` = RMSEP and ``sep_over_r`` = RMSEP/R.
"""
import math
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: Union[str, None] = "0002"
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

# 1.96·√2: 95 % difference limit over one result's SD (ISO 5725-6:1994, 4.1.4; ASTM E177).
# Written out here so the migration does not change if application code does.
_LIMIT_FACTOR = 1.96 * math.sqrt(2.0)
_OLD_KEY, _NEW_KEY = "max_sep_over_reproducibility", "max_sep_over_sigma_r"

_records = sa.table("validation_record", sa.column("id", sa.Integer), sa.column("sep", sa.Float),
                    sa.column("sdv", sa.Float), sa.column("rmsep", sa.Float),
                    sa.column("sep_over_r", sa.Float), sa.column("sep_over_sigma_r", sa.Float),
                    sa.column("statistics", sa.JSON))
_properties = sa.table("property", sa.column("id", sa.Integer), sa.column("acceptance", sa.JSON))


def _reproducibility(statistics) -> float | None:
    r = (statistics or {}).get("reproducibility")
    return float(r) if r is not None and float(r) > 0 else None


def _ratio(numerator: float, r: float | None, factor: float) -> float | None:
    return None if r is None else numerator * factor / r


def _rename_acceptance_key(old: str, new: str) -> None:
    conn = op.get_bind()
    for pid, acceptance in conn.execute(sa.select(_properties.c.id, _properties.c.acceptance)).all():
        if acceptance and old in acceptance:
            changed = {(new if k == old else k): v for k, v in acceptance.items()}
            conn.execute(_properties.update().where(_properties.c.id == pid)
                         .values(acceptance=changed))


def upgrade() -> None:
    with op.batch_alter_table("validation_record", schema=None) as batch_op:
        batch_op.add_column(sa.Column("sep_over_sigma_r", sa.Float(), nullable=True))
    conn = op.get_bind()
    rows = conn.execute(sa.select(_records.c.id, _records.c.sdv, _records.c.statistics)).all()
    for rid, sdv, statistics in rows:
        r = _reproducibility(statistics)
        conn.execute(_records.update().where(_records.c.id == rid).values(
            sep=sdv, sep_over_sigma_r=_ratio(sdv, r, _LIMIT_FACTOR)))
    with op.batch_alter_table("validation_record", schema=None) as batch_op:
        batch_op.drop_column("sep_over_r")
        batch_op.drop_column("sdv")
    _rename_acceptance_key(_OLD_KEY, _NEW_KEY)


def downgrade() -> None:
    with op.batch_alter_table("validation_record", schema=None) as batch_op:
        batch_op.add_column(sa.Column("sdv", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("sep_over_r", sa.Float(), nullable=True))
    conn = op.get_bind()
    rows = conn.execute(sa.select(_records.c.id, _records.c.sep, _records.c.rmsep,
                                  _records.c.statistics)).all()
    for rid, sep, rmsep, statistics in rows:
        r = _reproducibility(statistics)
        conn.execute(_records.update().where(_records.c.id == rid).values(
            sdv=sep, sep=rmsep, sep_over_r=_ratio(rmsep, r, 1.0)))
    with op.batch_alter_table("validation_record", schema=None) as batch_op:
        batch_op.alter_column("sdv", existing_type=sa.Float(), nullable=False)
        batch_op.drop_column("sep_over_sigma_r")
    _rename_acceptance_key(_NEW_KEY, _OLD_KEY)
