"""site correction settings: screening settings, measured harmonic spectrum, drive share

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-08 10:00:00.000000
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0004'
down_revision = '0003'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('site', schema=None) as batch_op:
        batch_op.add_column(sa.Column('screening_settings', sa.Text(), nullable=True))
        batch_op.add_column(sa.Column('harmonic_spectrum', sa.Text(), nullable=True))
        batch_op.add_column(sa.Column('drive_share', sa.Float(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('site', schema=None) as batch_op:
        batch_op.drop_column('drive_share')
        batch_op.drop_column('harmonic_spectrum')
        batch_op.drop_column('screening_settings')
