"""import plausibility and revision age: meter.max_kw and import_batch.source_mtime

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-02 10:00:00
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0008'
down_revision = '0007'
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD/DROP COLUMN (SQLite 3.35 and later have both): no table rebuild, so the meter
    # rows that readings refer to stay in place
    op.add_column('meter', sa.Column('max_kw', sa.Float(), nullable=True))
    op.add_column('import_batch', sa.Column('source_mtime', sa.Float(), nullable=True))


def downgrade() -> None:
    op.drop_column('import_batch', 'source_mtime')
    op.drop_column('meter', 'max_kw')
