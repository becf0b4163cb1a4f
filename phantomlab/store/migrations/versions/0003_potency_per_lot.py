"""Calibration potencies are unique per stock LOT in a state (was: per stock), so one
calibration state can hold two lots of the same stock.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

from __future__ import annotations

from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("calibration_potencies", schema=None) as batch_op:
        batch_op.drop_constraint("uq_calibration_potencies_state_stock", type_="unique")
        batch_op.create_unique_constraint(
            "uq_calibration_potencies_state_stock_lot", ["state_id", "stock_key", "lot"]
        )


def downgrade() -> None:
    with op.batch_alter_table("calibration_potencies", schema=None) as batch_op:
        batch_op.drop_constraint("uq_calibration_potencies_state_stock_lot", type_="unique")
        batch_op.create_unique_constraint(
            "uq_calibration_potencies_state_stock", ["state_id", "stock_key"]
        )
