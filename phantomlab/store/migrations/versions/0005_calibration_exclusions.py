"""Calibration you can review and undo: exclusions of batches or measurements (append-only,
with their reasons), rollback states that point at the state they restore, and a lot's
spectral correction beside its potency.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "calibration_exclusions",
        sa.Column("batch_code", sa.String(length=20), nullable=False),
        sa.Column("measurement_id", sa.Integer(), nullable=True),
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("uid", sa.String(length=32), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("retracted", sa.Boolean(), nullable=False),
        sa.Column("change_note", sa.Text(), nullable=True),
        sa.Column("recorded_at", sa.DateTime(), nullable=False),
        sa.Column("recorded_by", sa.String(length=200), nullable=True),
        sa.Column("supersedes_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["measurement_id"], ["measurements.id"]),
        sa.ForeignKeyConstraint(["supersedes_id"], ["calibration_exclusions.id"]),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("supersedes_id"),
        sa.UniqueConstraint("uid", "version", name="uq_calibration_exclusions_uid_version"),
    )
    with op.batch_alter_table("calibration_exclusions", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_calibration_exclusions_batch_code"), ["batch_code"], unique=False)
        batch_op.create_index(batch_op.f("ix_calibration_exclusions_uid"), ["uid"], unique=False)
    with op.batch_alter_table("calibration_potencies", schema=None) as batch_op:
        batch_op.add_column(sa.Column("spectral", sa.JSON(), nullable=True))
    # a plain ADD COLUMN (not a batch rebuild: calibration_potencies points at this table, and
    # SQLite with foreign keys on refuses to drop a table that is referenced)
    if op.get_bind().dialect.name == "sqlite":
        op.execute("ALTER TABLE calibration_states ADD COLUMN restores_state_id INTEGER "
                   "CONSTRAINT fk_calibration_states_restores_state_id REFERENCES calibration_states (id)")
    else:
        op.add_column("calibration_states", sa.Column("restores_state_id", sa.Integer(), nullable=True))
        op.create_foreign_key("fk_calibration_states_restores_state_id", "calibration_states",
                              "calibration_states", ["restores_state_id"], ["id"])


def downgrade() -> None:
    if op.get_bind().dialect.name != "sqlite":
        op.drop_constraint("fk_calibration_states_restores_state_id", "calibration_states", type_="foreignkey")
    op.drop_column("calibration_states", "restores_state_id")
    with op.batch_alter_table("calibration_potencies", schema=None) as batch_op:
        batch_op.drop_column("spectral")
    with op.batch_alter_table("calibration_exclusions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_calibration_exclusions_uid"))
        batch_op.drop_index(batch_op.f("ix_calibration_exclusions_batch_code"))
    op.drop_table("calibration_exclusions")
