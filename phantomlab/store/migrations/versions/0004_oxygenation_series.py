"""Oxygenation series of a batch: μa spectra over time with reference sO2 readings, both
files kept byte for byte, their unmixing and the readings as JSON.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('oxygenation_series',
    sa.Column('batch_id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('series_file_name', sa.String(length=500), nullable=False),
    sa.Column('series_content', sa.LargeBinary(), nullable=False),
    sa.Column('series_sha256', sa.String(length=64), nullable=False),
    sa.Column('readings_file_name', sa.String(length=500), nullable=True),
    sa.Column('readings_content', sa.LargeBinary(), nullable=True),
    sa.Column('readings_sha256', sa.String(length=64), nullable=True),
    sa.Column('chromophores', sa.String(length=100), nullable=False),
    sa.Column('extinction_source', sa.String(length=50), nullable=False),
    sa.Column('points', sa.JSON(), nullable=False),
    sa.Column('readings', sa.JSON(), nullable=False),
    sa.Column('software_version', sa.String(length=50), nullable=False),
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('retracted', sa.Boolean(), nullable=False),
    sa.Column('change_note', sa.Text(), nullable=True),
    sa.Column('recorded_at', sa.DateTime(), nullable=False),
    sa.Column('recorded_by', sa.String(length=200), nullable=True),
    sa.Column('supersedes_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['batch_id'], ['batches.id'], ),
    sa.ForeignKeyConstraint(['supersedes_id'], ['oxygenation_series.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('supersedes_id'),
    sa.UniqueConstraint('uid', 'version', name='uq_oxygenation_series_uid_version')
    )
    with op.batch_alter_table('oxygenation_series', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_oxygenation_series_batch_id'), ['batch_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_oxygenation_series_uid'), ['uid'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('oxygenation_series', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_oxygenation_series_uid'))
        batch_op.drop_index(batch_op.f('ix_oxygenation_series_batch_id'))

    op.drop_table('oxygenation_series')
