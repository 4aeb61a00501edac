"""bills: the utility's account and invoice numbers (optional text)

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02 09:54:14.541818
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0005'
down_revision = '0004'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('bill', schema=None) as batch_op:
        batch_op.add_column(sa.Column('account', sa.String(length=64), nullable=True))
        batch_op.add_column(sa.Column('invoice', sa.String(length=64), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('bill', schema=None) as batch_op:
        batch_op.drop_column('invoice')
        batch_op.drop_column('account')
