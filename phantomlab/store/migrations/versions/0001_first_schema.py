"""First schema of the batch log: stock lots, recipes, plans, batches, measurements,
fits and calibration states.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0001'
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('calibration_states',
    sa.Column('method', sa.String(length=200), nullable=False),
    sa.Column('computed_from', sa.JSON(), nullable=False),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('software_version', sa.String(length=50), nullable=False),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['supersedes_id'], ['calibration_states.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_calibration_states_uid_version')
    )
    with op.batch_alter_table('calibration_states', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_calibration_states_uid'), ['uid'], unique=False)

    op.create_table('recipes',
    sa.Column('name', sa.String(length=300), nullable=False),
    sa.Column('recipe_version', sa.String(length=50), nullable=True),
    sa.Column('content_hash', sa.String(length=128), nullable=False),
    sa.Column('definition', sa.JSON(), nullable=False),
    sa.Column('source_path', sa.Text(), nullable=True),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['supersedes_id'], ['recipes.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_recipes_uid_version')
    )
    with op.batch_alter_table('recipes', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_recipes_content_hash'), ['content_hash'], unique=False)
        batch_op.create_index(batch_op.f('ix_recipes_name'), ['name'], unique=False)
        batch_op.create_index(batch_op.f('ix_recipes_uid'), ['uid'], unique=False)

    op.create_table('stock_lots',
    sa.Column('stock_key', sa.String(length=100), nullable=False),
    sa.Column('lot', sa.String(length=200), nullable=True),
    sa.Column('kind', sa.String(length=20), nullable=False),
    sa.Column('expiry', sa.Date(), nullable=True),
    sa.Column('potency_prior', sa.Float(), nullable=True),
    sa.Column('potency_sd_prior', sa.Float(), nullable=True),
    sa.Column('definition', sa.JSON(), nullable=False),
    sa.Column('definition_sha256', sa.String(length=64), nullable=False),
    sa.Column('shelf_path', sa.Text(), nullable=True),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['supersedes_id'], ['stock_lots.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_stock_lots_uid_version')
    )
    with op.batch_alter_table('stock_lots', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_stock_lots_stock_key'), ['stock_key'], unique=False)
        batch_op.create_index(batch_op.f('ix_stock_lots_uid'), ['uid'], unique=False)

    op.create_table('batch_plans',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('recipe_id', sa.Integer(), nullable=False),
    sa.Column('plan', sa.JSON(), nullable=False),
    sa.Column('sheet_html', sa.Text(), nullable=True),
    sa.Column('potencies_used', sa.JSON(), nullable=False),
    sa.Column('calibration_state_id', sa.Integer(), nullable=True),
    sa.Column('software_version', sa.String(length=50), nullable=False),
    sa.Column('created_at', sa.DateTime(), nullable=False),
    sa.ForeignKeyConstraint(['calibration_state_id'], ['calibration_states.id'], ),
    sa.ForeignKeyConstraint(['recipe_id'], ['recipes.id'], ),
    sa.PrimaryKeyConstraint('id')
    )
    op.create_table('calibration_potencies',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('state_id', sa.Integer(), nullable=False),
    sa.Column('stock_key', sa.String(length=100), nullable=False),
    sa.Column('lot', sa.String(length=200), nullable=True),
    sa.Column('stock_lot_id', sa.Integer(), nullable=True),
    sa.Column('potency', sa.Float(), nullable=False),
    sa.Column('potency_sd', sa.Float(), nullable=False),
    sa.ForeignKeyConstraint(['state_id'], ['calibration_states.id'], ),
    sa.ForeignKeyConstraint(['stock_lot_id'], ['stock_lots.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('state_id', 'stock_key', name='uq_calibration_potencies_state_stock')
    )
    with op.batch_alter_table('calibration_potencies', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_calibration_potencies_state_id'), ['state_id'], unique=False)

    op.create_table('batch_plan_lots',
    sa.Column('plan_id', sa.Integer(), nullable=False),
    sa.Column('stock_key', sa.String(length=100), nullable=False),
    sa.Column('stock_lot_id', sa.Integer(), nullable=False),
    sa.ForeignKeyConstraint(['plan_id'], ['batch_plans.id'], ),
    sa.ForeignKeyConstraint(['stock_lot_id'], ['stock_lots.id'], ),
    sa.PrimaryKeyConstraint('plan_id', 'stock_key')
    )
    op.create_table('batches',
    sa.Column('code', sa.String(length=20), nullable=False),
    sa.Column('plan_id', sa.Integer(), nullable=False),
    sa.Column('status', sa.String(length=20), nullable=False),
    sa.Column('operator', sa.String(length=200), nullable=True),
    sa.Column('planned_on', sa.Date(), nullable=False),
    sa.Column('mixed_on', sa.Date(), nullable=True),
    sa.Column('matrix_details', sa.JSON(), nullable=True),
    sa.Column('cure_details', sa.JSON(), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('actual_amounts', sa.JSON(), nullable=True),
    sa.Column('actual_prediction', sa.JSON(), nullable=True),
    sa.Column('actual_alarms', sa.JSON(), nullable=True),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.CheckConstraint("status IN ('planned', 'mixed', 'characterised', 'retired')", name='ck_batches_status'),
    sa.ForeignKeyConstraint(['plan_id'], ['batch_plans.id'], ),
    sa.ForeignKeyConstraint(['supersedes_id'], ['batches.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('code', 'version', name='uq_batches_code_version'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_batches_uid_version')
    )
    with op.batch_alter_table('batches', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_batches_code'), ['code'], unique=False)
        batch_op.create_index(batch_op.f('ix_batches_uid'), ['uid'], unique=False)

    op.create_table('measurements',
    sa.Column('batch_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=20), nullable=False),
    sa.Column('file_name', sa.String(length=500), nullable=False),
    sa.Column('raw_content', sa.LargeBinary(), nullable=False),
    sa.Column('content_sha256', sa.String(length=64), nullable=False),
    sa.Column('metadata_toml', sa.Text(), nullable=True),
    sa.Column('instrument', sa.String(length=200), nullable=True),
    sa.Column('geometry', sa.JSON(), nullable=True),
    sa.Column('measured_on', sa.Date(), nullable=True),
    sa.Column('phantom_age_days', sa.Float(), nullable=True),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['batch_id'], ['batches.id'], ),
    sa.ForeignKeyConstraint(['supersedes_id'], ['measurements.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_measurements_uid_version')
    )
    with op.batch_alter_table('measurements', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_measurements_batch_id'), ['batch_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_measurements_uid'), ['uid'], unique=False)

    op.create_table('fits',
    sa.Column('measurement_id', sa.Integer(), nullable=False),
    sa.Column('model', sa.String(length=100), nullable=False),
    sa.Column('results', sa.JSON(), nullable=False),
    sa.Column('covariance', sa.JSON(), nullable=True),
    sa.Column('warnings', sa.JSON(), nullable=False),
    sa.Column('chi2_red', sa.Float(), nullable=True),
    sa.Column('software_version', sa.String(length=50), nullable=False),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['measurement_id'], ['measurements.id'], ),
    sa.ForeignKeyConstraint(['supersedes_id'], ['fits.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_fits_uid_version')
    )
    with op.batch_alter_table('fits', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_fits_measurement_id'), ['measurement_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_fits_uid'), ['uid'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('fits', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_fits_uid'))
        batch_op.drop_index(batch_op.f('ix_fits_measurement_id'))

    op.drop_table('fits')
    with op.batch_alter_table('measurements', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_measurements_uid'))
        batch_op.drop_index(batch_op.f('ix_measurements_batch_id'))

    op.drop_table('measurements')
    with op.batch_alter_table('batches', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_batches_uid'))
        batch_op.drop_index(batch_op.f('ix_batches_code'))

    op.drop_table('batches')
    op.drop_table('batch_plan_lots')
    with op.batch_alter_table('calibration_potencies', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_calibration_potencies_state_id'))

    op.drop_table('calibration_potencies')
    op.drop_table('batch_plans')
    with op.batch_alter_table('stock_lots', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_stock_lots_uid'))
        batch_op.drop_index(batch_op.f('ix_stock_lots_stock_key'))

    op.drop_table('stock_lots')
    with op.batch_alter_table('recipes', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_recipes_uid'))
        batch_op.drop_index(batch_op.f('ix_recipes_name'))
        batch_op.drop_index(batch_op.f('ix_recipes_content_hash'))

    op.drop_table('recipes')
    with op.batch_alter_table('calibration_states', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_calibration_states_uid'))

    op.drop_table('calibration_states')
