"""scenario cover: client, project and author of the case document

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-09 10:00:00
"""
from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0006'
down_revision = '0005'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('scenario', schema=None) as batch_op:
        batch_op.add_column(sa.Column('client', sa.String(length=200), nullable=True))
        batch_op.add_column(sa.Column('project', sa.String(length=200), nullable=True))
        batch_op.add_column(sa.Column('author', sa.String(length=200), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('scenario', schema=None) as batch_op:
        batch_op.drop_column('author')
        batch_op.drop_column('project')
        batch_op.drop_column('client')
